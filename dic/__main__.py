"""``python -m dic``: the same as the ``dic`` command."""

import sys

from dic.cli import main

if __name__ == "__main__":
    sys.exit(main())
