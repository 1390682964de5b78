"""Checks on a plan or a capture: the survey, the alias audit and the tone-sweep verify.

May import: ``run``, ``engines``, ``planning``, ``io``, ``dsp``, ``errors``, ``units``.
"""
