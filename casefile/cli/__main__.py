"""`python -m casefile.cli` runs the command line."""

import sys

from casefile.cli import main

sys.exit(main())
