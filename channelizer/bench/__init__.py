"""Benchmark and soak runs: speed and memory as ratios against a reference run in the
same process (``measure``), never absolute timings.

May import: every sub-package below ``views``.
"""
