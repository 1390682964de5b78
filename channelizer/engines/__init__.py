"""Engines: each turns a plan's stages into runners with ``process(block)``.

``streaming`` is the float chain (complex64, polyphase block products, mixing folded
into the first stage); ``integer_chain`` is the bit-true chain built from the integer
primitives in ``channelizer.dsp``.  Later engines (a filter bank) belong here too.

May import: ``planning``, ``dsp``, ``errors``, ``units``; never ``io``, ``run`` or above.
"""
