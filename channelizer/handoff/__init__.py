"""Hand-off to hardware: coefficients, bit widths and test vectors (``export``).

May import: ``engines``, ``planning``, ``io``, ``errors``, ``units``.
"""
