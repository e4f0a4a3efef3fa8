"""`python -m station` is the same as the `nightbench` command."""

import sys

from station.cli.main import main

sys.exit(main())
