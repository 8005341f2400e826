"""Process-wide numeric settings that make serial and Dask runs bit-identical.

Dask starts its worker processes with one BLAS/OpenMP thread (environment
variables read when the numeric libraries load). OpenBLAS initialised that way
sums in a different order from one limited later at run time, which moves the
last bits of a few fitted values. The command line therefore starts its own
process the same way, before numpy is imported; Python users who need
bit-identical serial and distributed results do the same (call this first).
"""

from __future__ import annotations

import os
import sys

__all__ = ["pin_numeric_threads", "THREAD_VARIABLES"]

THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def pin_numeric_threads() -> bool:
    """Set one BLAS/OpenMP thread for this process, as in Dask workers.

    Returns
    -------
    bool
        True if it took effect (numpy not imported yet), False otherwise.
    """
    for name in THREAD_VARIABLES:
        os.environ[name] = "1"
    return "numpy" not in sys.modules
