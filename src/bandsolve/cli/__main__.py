"""``python -m bandsolve.cli``: the same as the ``bandsolve`` command."""

import sys

from . import main

sys.exit(main())
