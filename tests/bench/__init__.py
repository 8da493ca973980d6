"""Benchmarks: plain scripts that print timings and ratios (no assertions on time)."""
