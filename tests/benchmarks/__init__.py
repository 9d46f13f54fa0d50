"""Benchmark scripts, run on demand with ``make bench`` (``python -m tests.benchmarks``); not collected as tests."""
