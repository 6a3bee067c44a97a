"""Pure chart builders: DataFrame in, plotly Figure out (no Django, no I/O). One module per page family."""
