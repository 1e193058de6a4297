"""lagspace engine: stateless delay-coordinate embedding and diagnostics.

Every public function takes data and settings and returns new data (mostly
``xarray.Dataset``); nothing here keeps state between calls or imports a UI
library.
"""

import os

# Kernels run in parallel from several dashboard threads at once: numba's default
# work-queue layer is not safe for that, "threadsafe" picks OpenMP or TBB.
os.environ.setdefault("NUMBA_THREADING_LAYER", "threadsafe")
# Idle OpenMP threads yield the core at once instead of spinning: on a shared 2-core
# machine spinning threads slowed the parallel kernels 10-20 times.
os.environ.setdefault("OMP_WAIT_POLICY", "passive")

__version__ = "0.1.0"
