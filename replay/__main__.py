"""``python -m replay FOLDER --to ws://HOST:PORT/ingest/MATCH``: same as ``pacewire replay``."""
import sys

from replay.player import main

sys.exit(main())
