"""``python -m stelltemp.cli``: the same as the ``stelltemp`` command."""

import sys

from . import main

sys.exit(main())
