"""Allow ``python -m routerisk``."""

import sys

from .cli import main

sys.exit(main())
