"""Allow ``python -m routerisk``."""

import sys

from routerisk.cli import main

sys.exit(main())
