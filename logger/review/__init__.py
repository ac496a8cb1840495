"""After the test: summaries, event drill-down, plots, exports and comparisons of recorded runs."""
