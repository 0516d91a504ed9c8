"""``python -m bandsolve.cli``: the same as the ``bandsolve`` command."""

import sys

from bandsolve.cli import main

sys.exit(main())
