"""Benchmarks whose figures go into the README (never into tests)."""
