"""Shared builders for the tests and the benchmarks (no test module imports another)."""
