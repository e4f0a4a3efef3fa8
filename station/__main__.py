"""`python -m station` is the same as the `nightbench` command."""

import sys

from station.cli import main

sys.exit(main())
