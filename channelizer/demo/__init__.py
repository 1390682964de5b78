"""The demo: an invented scene (``scene``) and the job that plans, surveys, extracts,
verifies and reports on it (``job``).

May import: every other sub-package except ``bench``.
"""
