"""Benchmarks of dagmill's learning against a reference library (run: python -m benchmarks)."""
