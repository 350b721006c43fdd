"""Names and messages on the console and in the reports: nothing a file name holds can steer a
terminal, reorder a line, crash a strict UTF-8 stdout, or run as a spreadsheet formula; and a
report never replaces a file chainrun did not write.

Expected values: the Unicode Character Database as Python's unicodedata has it (bidirectional
classes, Unicode Standard Annex #9), the OWASP "CSV Injection" guidance, Python's csv and json
modules (reference libraries), and analytic facts.
"""
from __future__ import annotations

import csv
import io
import json
import os
import subprocess
import sys
import unicodedata

import numpy as np
import pytest

from chainrun.text import one_line, shown

# Unicode Standard Annex #9, Table 4: the explicit directional formatting characters' classes.
_EXPLICIT_BIDI = {"LRE", "RLE", "PDF", "LRO", "RLO", "LRI", "RLI", "FSI", "PDI"}
# Unicode Standard Annex #9, 2.6: the implicit directional marks.
_MARKS = ("LEFT-TO-RIGHT MARK", "RIGHT-TO-LEFT MARK", "ARABIC LETTER MARK")


def _disguising() -> list[str]:
    """Every character one line of text must not carry as it is, from the UCD (not from chainrun)."""
    chars = [chr(c) for c in range(0x10000) if unicodedata.bidirectional(chr(c)) in _EXPLICIT_BIDI]
    chars += [unicodedata.lookup(n) for n in _MARKS]
    chars += [chr(c) for c in range(0x80, 0xA0) if unicodedata.category(chr(c)) == "Cc"]   # C1 controls
    return chars


def test_disguising_characters_are_shown_as_u_escapes():
    chars = _disguising()
    # UAX #9: 9 explicit formatting characters (U+202A-U+202E, U+2066-U+2069), 3 marks; 32 C1 controls
    assert len(chars) == 9 + 3 + 32
    for c in chars:
        for f in (one_line, shown):
            out = f(f"take{c}1.wav")
            assert out == f"take\\u{ord(c):04x}1.wav", (hex(ord(c)), out)
            assert out.isascii()
    # the "Trojan Source" example shape (Boucher & Anderson 2021): an override reverses what follows
    assert shown("night\u202evaw.exe") == "night\\u202evaw.exe"
    # line and paragraph separators (UCD categories Zl, Zp) and zero-width characters
    for c in "\u2028\u2029\u200b\u2060\ufeff":
        assert one_line(c) == f"\\u{ord(c):04x}"


def test_old_escapes_and_ordinary_names_are_unchanged():
    # analytic: the escapes chainrun wrote before, as Python's repr() writes them
    assert one_line("a\nb\tc\rd\x1b[31me\x7ff\x00") == "a\\nb\\tc\\rd\\x1b[31me\\x7ff\\x00"
    assert shown("m\udce9t\udce9o.wav") == "m\\xe9t\\xe9o.wav"       # bytes that are not UTF-8
    # ordinary names of many scripts, with the joiners they need, pass through as they are
    for name in ("météo_marée.wav", "ساحل\u200cها.flac", "हिन्दी.wav", "👩\u200d🎤 take.aiff", "潮汐.wav",
                 "back\\slash.wav", "Ωmega ½.wav"):
        assert one_line(name) == name and shown(name) == name
