"""``chainrun plot``: draw the response (:func:`chainrun.app.plot`) and print the picture's path.

A chain the guard rejects is still drawn (the picture shows why), then the command says so in one
line on stderr and exits 1, as ``check`` does for a rejected recipe.
"""
from __future__ import annotations

import argparse

from ..app import plot
from ..text import shown
from .common import EXIT_NOT_OK, EXIT_OK, _err


def main(args: argparse.Namespace) -> int:
    assessment = plot(args.recipe, args.rate, args.output, warn=_err, allow_outside_includes=args.allow_outside_includes)
    print(shown(args.output))
    if not assessment.accepted:
        _err(f"{args.recipe}: rejected: the guard rejects this chain at {args.rate} Hz (the picture shows why); "
             "it would not be applied to any file")
        return EXIT_NOT_OK
    return EXIT_OK
