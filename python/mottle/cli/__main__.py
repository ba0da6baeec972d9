"""``python -m mottle.cli``: the ``mottle`` command."""

import sys

from . import main

sys.exit(main())
