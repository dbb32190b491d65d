"""``python -m pitchguard``: the command line."""

import sys

from pitchguard.cli import main

sys.exit(main())
