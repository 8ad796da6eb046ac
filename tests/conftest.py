import os
import sys
from pathlib import Path

# before numpy loads (see service/__init__.py): one BLAS thread
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

# tests import their helpers (cdf_build, ...) as top-level modules
sys.path.insert(0, str(Path(__file__).parent))
