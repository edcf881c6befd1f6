"""``python -m valuation``: the core's command line."""

import sys

from valuation.cli import main

sys.exit(main())
