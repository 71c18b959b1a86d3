"""``python -m codec.cli`` runs the ``coefwire`` command line."""

import sys

from . import main

sys.exit(main())
