"""``python -m stelltemp``: the same as the ``stelltemp`` command."""

import sys

from .cli import main

sys.exit(main())
