"""``python -m fallcam``: the same as the ``fallcam`` command."""

import sys

from fallcam.cli import main

sys.exit(main())
