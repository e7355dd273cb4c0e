"""`python -m mcmatch` is the `mcmatch` command."""

import sys

from mcmatch.cli import main

sys.exit(main())
