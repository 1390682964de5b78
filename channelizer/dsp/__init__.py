"""Stream primitives that know nothing of plans or files.

Welch and spectrogram accumulators, the noise floor and signal detection (``spectrum``),
and the integer arithmetic stages: phase-accumulator NCO, CIC, FIR and rational
resampler (``fixedpoint``).  Each holds its own state across blocks.

May import: ``channelizer.errors``, ``channelizer.units`` and the published formulas in
``channelizer.planning`` (Hogenauer register widths, quantised taps).
"""
