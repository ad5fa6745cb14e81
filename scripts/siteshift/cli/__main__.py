"""`python -m siteshift.cli`: the same as the `siteshift` command."""
import sys

from . import main

sys.exit(main())
