"""`python -m acquire.cli` runs the command line, as the `flipsweep` script does."""

import sys

from acquire.cli.main import main

sys.exit(main())
