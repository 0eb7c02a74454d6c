"""``python -m vfactor``: the same as the ``vfactor`` command."""

import sys

from vfactor.cli import main

if __name__ == "__main__":  # guarded: worker processes (spawn) import this module again
    sys.exit(main())
