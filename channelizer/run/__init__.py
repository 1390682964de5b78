"""One pass over a capture: the processor (reader -> per-channel engines -> writers)
and the extraction job that loads plans, runs the pass and writes the run's files.

May import: ``engines``, ``planning``, ``io``, ``dsp``, ``errors``, ``units``, and
``views`` and ``checks.alias_audit`` lazily for the figures and audit of a run.
"""
