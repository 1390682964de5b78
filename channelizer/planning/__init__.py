"""Planning: from a spec to a plan, with no I/O.

Holds what is asked (``spec``), one stage's design (``design``, ``stages``), CIC register
widths (``hogenauer``), coefficient quantisation (``quantize``), the composite response and
its alias bands (``response``), the cost model (``cost``), the search over chains
(``planner``) and the plan file (``plan``: a dataclass that round-trips through YAML text;
reading and writing the file itself is the caller's job).

May import: ``channelizer.errors``, ``channelizer.units`` and ``channelizer.strict_yaml`` only.
"""
