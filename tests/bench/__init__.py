"""Benchmarks (`make bench`, `python -m tests.bench.run`); never collected as tests."""
