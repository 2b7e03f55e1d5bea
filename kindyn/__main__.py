"""``python -m kindyn ...`` is the same as the ``kindyn`` command."""

import sys

from kindyn.cli import main

sys.exit(main())
