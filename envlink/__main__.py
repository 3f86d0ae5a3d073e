"""Allow ``python -m envlink``."""

import sys

from envlink.cli import main

sys.exit(main())
