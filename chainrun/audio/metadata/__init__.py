"""The metadata a recording carries beside its audio: read, planned and carried to the output.

One module per container family: :mod:`.riff` (WAV, WAVE_FORMAT_EXTENSIBLE, RF64/BW64, W64)
with :mod:`.bext` (EBU Tech 3285), :mod:`.flac` (metadata blocks through mutagen) and
:mod:`.aiff` (AIFF and AIFF-C chunks).
"""

from __future__ import annotations

__all__ = ["metadata_summary"]


def metadata_summary(src_or_path) -> dict:
    """What ``chainrun scan`` shows of a file's metadata, as plain data.

    Parameters
    ----------
    src_or_path : Source or str
        A probed :class:`~chainrun.audio.source.Source` (its layout is reused) or a path
        (its format told by libsndfile's header reading).

    Returns
    -------
    dict
        ``container`` (riff, flac, aiff or None), ``chunks`` (id, byte offset, size; FLAC: block
        names), ``notes`` (one line each on malformed metadata); from a bext chunk
        ``description`` and ``time_reference`` (samples since midnight) with
        ``time_reference_hms`` (hh:mm:ss:samples at the file's rate); from an iXML chunk
        ``scene`` and ``take`` when present.
    """
    from .carry import read_source_meta

    if isinstance(src_or_path, str):
        import soundfile as sf

        path = src_or_path
        info = sf.info(path)
        meta, rate = read_source_meta(path, info.format), int(info.samplerate)
    else:
        path, meta, rate = src_or_path.path, src_or_path.meta, src_or_path.rate
    out: dict = {"container": meta.kind if meta else None, "chunks": [],
                 "notes": list(meta.notes) if meta else []}
    layout = meta.layout if meta else None
    if layout is None:
        return out
    if meta.kind == "flac":
        from .flac import _BLOCKS
        out["chunks"] = [{"id": _BLOCKS.get(code, (f"type {code}",))[0], "at_byte": at, "bytes": n}
                         for code, at, n, _ in layout.blocks]
        return out
    out["chunks"] = [{"id": c.id, "at_byte": c.offset, "bytes": c.size} for c in layout.chunks]
    for c in layout.chunks:
        payload = getattr(c, "payload", None)
        if c.id == "bext" and payload is not None and not c.note:
            from .bext import describe_bext
            b = describe_bext(payload, rate)
            out.update(description=b["description"], time_reference=b["time_reference"],
                       time_reference_hms=b["time_reference_hms"])
        elif c.id == "iXML" and payload is not None:
            out.update(_ixml_scene_take(payload))
    return out


def _ixml_scene_take(payload: bytes) -> dict:
    """SCENE and TAKE of an iXML document (iXML specification: top-level elements of BWFXML)."""
    import xml.etree.ElementTree as ET

    try:
        root = ET.fromstring(payload.rstrip(b"\0 \r\n\t"))
    except ET.ParseError:
        return {}
    found = {}
    for key in ("SCENE", "TAKE"):
        el = root.find(key)
        if el is not None and el.text and el.text.strip():
            found[key.lower()] = el.text.strip()
    return found
