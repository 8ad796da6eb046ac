"""``python -m pacewire.replay.synth``: same as ``pacewire synth``."""
import sys

from pacewire.replay.synth.cli import main

sys.exit(main())
