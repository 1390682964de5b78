"""``python -m channelizer``."""

import sys

from .cli import main

sys.exit(main())
