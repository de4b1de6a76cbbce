"""``python -m livestep``."""

import sys

from livestep.cli import main

sys.exit(main())
