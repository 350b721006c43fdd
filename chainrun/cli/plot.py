"""``chainrun plot``: draw the response (:func:`chainrun.app.plot`) and print the picture's path."""
from __future__ import annotations

import argparse

from ..app import plot
from ..text import shown
from .common import EXIT_OK, _err


def main(args: argparse.Namespace) -> int:
    plot(args.recipe, args.rate, args.output, warn=_err, allow_outside_includes=args.allow_outside_includes)
    print(shown(args.output))
    return EXIT_OK
