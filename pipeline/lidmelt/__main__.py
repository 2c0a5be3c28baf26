"""Allow ``python -m lidmelt``."""

import sys

from lidmelt.cli import main

sys.exit(main())
