"""``python -m chainrun``: the same as the ``chainrun`` console script."""
import sys

from .cli import main

sys.exit(main())
