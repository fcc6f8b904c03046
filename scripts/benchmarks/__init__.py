"""Benchmark suites: each figure a ratio against a reference measured in the same run."""
