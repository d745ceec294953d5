"""``python -m ruleguard``."""

import sys

from ruleguard.cli import main

sys.exit(main())
