"""``python -m heatwalk``: the command line."""

import sys

from heatwalk.frontend.cli import main

sys.exit(main())
