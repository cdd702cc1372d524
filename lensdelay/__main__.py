"""``python -m lensdelay``: the command line."""

import sys

from lensdelay.cli.main import main

__all__: list[str] = []


sys.exit(main())
