"""``python -m replay FOLDER --to ws://HOST:PORT/ingest/MATCH``: same as ``pacewire replay``."""
import sys

from pacewire.replay.player import main

sys.exit(main())
