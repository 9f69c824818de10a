"""``python -m stelltemp``: the same as the ``stelltemp`` command."""

import sys

from .cli import main

if __name__ == "__main__":  # not when a spawned process (`stelltemp.sidecar`) imports it
    sys.exit(main())
