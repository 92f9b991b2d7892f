"""``python -m preyscape``."""

import sys

from preyscape.cli import main

sys.exit(main())
