"""pacewire: live exertion service for football."""
import os

__version__ = "0.1.0"

# The engine's matrix products are small: one BLAS thread is fastest, and on a
# busy machine several threads spin against each other (measured: ~3x slower
# with two threads on two loaded cores). Set before numpy loads; a user's own
# setting wins.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
