"""Where an ``include:`` points: a relative path, inside the top recipe's folder tree, to a file.

An include is resolved from the folder of the file that writes it. Unless the caller allows it
(``--allow-outside-includes``, ``load(..., allow_outside_includes=True)``), the file it names --
after every symbolic link is followed -- must lie inside the folder of the top-level recipe (or,
for a recipe given as text, the working folder): a recipe from elsewhere cannot make chainrun read
``../../../etc/passwd`` and repeat its lines in errors. Nothing outside is opened, so an error
names the include and where it points, never what the target holds.
"""
from __future__ import annotations

import errno
import os

from ..errors import Location, RecipeError

__all__ = ["include_tree", "resolve_include"]

ALLOW_FLAG = "--allow-outside-includes"


def include_tree(top_path: str, allow_outside: bool) -> str | None:
    """The folder every include must stay inside (symbolic links resolved), or None for anywhere."""
    return None if allow_outside else os.path.realpath(os.path.dirname(top_path) or os.curdir)


def resolve_include(rel: str, where: Location, including: str, tree: str | None) -> str:
    """The path of the file ``rel`` (written at ``where`` in the file ``including``) names.

    Raises
    ------
    RecipeError
        One located line: not a relative path, a symbolic-link loop, outside ``tree``, missing.
    """
    if not rel.strip() or os.path.isabs(rel):
        raise RecipeError.at(where, f"include '{rel}' is not a relative path; "
                                    "give a path relative to this recipe's folder")
    target = os.path.normpath(os.path.join(os.path.dirname(including), rel))
    try:
        os.stat(target)
        found = True
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise RecipeError.at(where, f"include '{rel}' is a symbolic link loop (looked for {target}); "
                                        "point it at a recipe file") from None
        found = False
    if tree is not None:
        real = os.path.realpath(target)
        if os.path.commonpath([tree, real]) != tree:
            raise RecipeError.at(where, f"include '{rel}' points outside the recipe's folder {tree} (to {real}); "
                                        f"keep included recipes inside it, or pass {ALLOW_FLAG} "
                                        "(Python: allow_outside_includes=True)")
    if not found:
        raise RecipeError.at(where, f"included recipe '{rel}' does not exist "
                                    f"(looked for {target}); paths are relative to this recipe's folder")
    return target
