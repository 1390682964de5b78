"""What a person reads: printed tables, figures and the HTML report.

May import: every layer below it (``checks``, ``run``, ``engines``, ``planning``, ``io``,
``dsp``); nothing imports ``views`` at module level except the CLI and the demo.
"""
