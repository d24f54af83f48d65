"""``python -m corridor``."""

import sys

from corridor.cli import main

sys.exit(main())
