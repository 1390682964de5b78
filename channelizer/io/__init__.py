"""Files in and out: capture readers, the SigMF writer, atomic writes, names, channel lists.

``datatypes`` holds the SigMF datatype grammar and scaling, ``captures`` the SigMF, WAV
and raw readers, ``sigmf_writer`` the per-channel recordings, ``atomic`` the
temp-name-then-rename writing every output goes through, ``names`` safe output names and
``channels`` the channel requests and channel-list files.

May import: ``channelizer.errors`` and ``channelizer.units`` only.
"""
