"""``python -m harness`` is the ``foldbench`` command."""
import sys

from .cli import main

sys.exit(main())
