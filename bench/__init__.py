"""Benchmarks at scale: every target is a ratio of two figures measured in the same run (see RESULTS.md)."""
