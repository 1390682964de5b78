"""Files in and out: capture readers, the SigMF writer, atomic writes, names, channel lists.

``datatypes`` holds the SigMF datatype grammar and scaling, ``captures`` the SigMF, WAV
and raw readers, ``sigmf_writer`` the per-channel recordings, ``atomic`` the
temp-name-then-rename writing every output goes through, ``names`` safe output names and
``channels`` the channel requests and channel-list files, ``paths`` the check of outputs
against inputs, ``run_folder`` the folder built beside and committed with one rename,
``sample_reader`` the bounded reads of stored samples.

May import: ``channelizer.errors``, ``channelizer.units`` and ``channelizer.strict_yaml`` only.
"""
