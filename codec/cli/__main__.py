"""``python -m codec.cli`` runs the ``trimlink`` command line."""

import sys

from . import main

sys.exit(main())
