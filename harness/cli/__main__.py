"""``python -m harness.cli`` is the ``foldbench`` command."""

import sys

from . import main

sys.exit(main())
