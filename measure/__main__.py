"""``python -m measure``: the same as the ``measure`` command."""

import sys

from measure.cli import main

if __name__ == "__main__":
    sys.exit(main())
