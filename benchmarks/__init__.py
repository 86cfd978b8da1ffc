"""Benchmarks: printed figures and ratios measured in one run (never asserted in the test suite)."""
