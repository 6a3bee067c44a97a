"""REST endpoints of the analytics app (flaky tests, quarantine, failure causes, forecasts)."""
