"""Benchmarks: run with `make bench` (not collected by pytest)."""
