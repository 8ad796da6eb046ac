"""``python -m pacewire``: the ``pacewire`` command."""
import sys

from pacewire.cli import main

sys.exit(main())
