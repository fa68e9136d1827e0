"""``python -m wellwright.optimize.cli``: the ``wellwright`` command."""

import sys

from wellwright.optimize.cli.app import main

sys.exit(main())
