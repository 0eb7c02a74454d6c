"""``python -m vfactor``: the same as the ``vfactor`` command."""

import sys

from vfactor.cli import main

sys.exit(main())
