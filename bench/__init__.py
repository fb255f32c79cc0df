"""Ratio benchmarks of Remanence: each figure compares two times measured in the same run.

Run with ``python -m bench`` (``make bench``); see bench/__main__.py for the options and
bench/results/latest.md for the last report.
"""
