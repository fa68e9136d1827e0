"""``python -m wellwright.optimize.cli``: the ``wellwright`` command."""

import sys

from wellwright.optimize.cli import main

sys.exit(main())
