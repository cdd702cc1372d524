"""``python -m lensdelay``: the command line."""

import sys

from lensdelay.cli.main import main

sys.exit(main())
