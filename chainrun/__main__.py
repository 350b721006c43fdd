"""``python -m chainrun``: the same as the ``chainrun`` console script."""
import sys

from .cli import main

if __name__ == "__main__":  # guarded: worker processes re-import this module
    sys.exit(main())
