"""The metadata a recording carries beside its audio: read, planned and carried to the output.

One module per container family: :mod:`.riff` (WAV, WAVE_FORMAT_EXTENSIBLE, RF64/BW64, W64)
with :mod:`.bext` (EBU Tech 3285), :mod:`.flac` (metadata blocks through mutagen) and
:mod:`.aiff` (AIFF and AIFF-C chunks).
"""
