"""Benchmarks, each run side by side with its baseline in one process (``python -m bench``).

A figure on a noisy 2-core machine means little alone; the ratio to a baseline measured in the
same run (same rows, same batch size, same machine state) is what holds from run to run. Not
tests: nothing here asserts a time. See README.md, "Performance", for the latest figures.
"""
