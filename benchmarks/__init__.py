"""Benchmarks and long reliability runs (run as modules: ``python -m benchmarks.load``).

Not part of the test run; each prints its figures as JSON. See EVIDENCE.md for the commands.
"""
