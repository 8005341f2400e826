"""Process-wide numeric settings that make serial and Dask runs bit-identical.

Dask starts its worker processes with one BLAS/OpenMP thread (environment
variables read when the numeric libraries load). OpenBLAS initialised that way
sums in a different order from one limited later at run time, which moves the
last bits of a few fitted values. The command line therefore starts its own
process the same way, before numpy is imported; Python users who need
bit-identical serial and distributed results do the same (call this first).

:func:`retain_freed_memory` keeps freed memory in the process, so the next tile reuses pages
instead of faulting in new ones. A tile makes dozens of full-size numpy temporaries. With
glibc's defaults each one above the mmap threshold (at most 32 MiB) is mapped from, and on
release returned to, the kernel, and the top of the heap is trimmed after every large free, so
every tile touches fresh pages again. On virtual machines a first touch can cost tens of
microseconds per page: on the benchmark DEMs (2368 px tiles, one process) system time was
1.6-4 s of a 5.4-9 s tile, and with the thresholds below the same tiles took 2.6-2.9 s with the
same peak memory (one tile's high-water mark is unchanged; it is just not given back between
tiles). ``MALLOC_MMAP_THRESHOLD_`` and ``MALLOC_TRIM_THRESHOLD_`` are glibc's documented
tunables (mallopt(3)); elsewhere (macOS, musl, Windows) nothing is changed.

It also asks numpy not to request transparent huge pages for its arrays
(``NUMPY_MADVISE_HUGEPAGE=0``, read when numpy loads). A process's first huge pages cost
the kernel a compaction each: the first tile of a run took 6.8 s with them and 4.6 s
without, later tiles the same (3.2-3.8 s) either way, so a one-tile DEM paid ~50 % more per
pixel than a many-tile one.

Dask runs each task in a worker thread, not the process's main thread, and glibc gives other
threads their own malloc arenas, whose heaps are at most 64 MiB: a tile's larger temporaries
were mapped afresh every time whatever the thresholds (56,000-176,000 new pages per tile
against ~100 with one arena; tiles 4-6 s instead of 3.3-4.5 s). ``MALLOC_ARENA_MAX=1`` keeps
every thread on the main arena, which the thresholds govern.
"""

from __future__ import annotations

import ctypes
import os
import sys

__all__ = ["HUGEPAGE_VARIABLE", "THREAD_VARIABLES", "WORKER_ENVIRON", "pin_numeric_threads", "retain_freed_memory"]

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

#: Allocations below this come from the heap and stay there when freed (bytes).
_THRESHOLD = 1 << 30
# mallopt(3) parameter numbers, from glibc's <malloc.h>.
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3
_M_ARENA_MAX = -8

#: numpy's switch for madvise(MADV_HUGEPAGE) on large arrays (read when numpy is imported).
HUGEPAGE_VARIABLE = "NUMPY_MADVISE_HUGEPAGE"
#: The same settings for worker processes we spawn (read at process start).
WORKER_ENVIRON = {"MALLOC_MMAP_THRESHOLD_": str(_THRESHOLD), "MALLOC_TRIM_THRESHOLD_": str(_THRESHOLD),
                  "MALLOC_ARENA_MAX": "1", HUGEPAGE_VARIABLE: "0"}


def retain_freed_memory() -> bool:
    """Ask glibc to keep freed memory for reuse in this process (one arena for all threads), and
    numpy not to ask for huge pages.

    A no-op outside Linux. Call it before numpy is imported for the huge-page part.

    Returns
    -------
    bool
        True if both thresholds were set.
    """
    if not sys.platform.startswith("linux"):
        return False
    # In the environment too: numpy reads it when it loads (only effective before numpy is
    # imported; the command line calls this first), glibc at the start of child processes
    # (e.g. the training set's process pool).
    for name, value in WORKER_ENVIRON.items():
        os.environ.setdefault(name, value)
    try:
        # The C library already loaded in this process (no library search, no subprocess).
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):  # not glibc
        return False
    mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
    mallopt.restype = ctypes.c_int
    # One arena for every thread (see the module notes); threads started later use it too.
    mallopt(_M_ARENA_MAX, 1)
    return bool(mallopt(_M_MMAP_THRESHOLD, _THRESHOLD)) and bool(mallopt(_M_TRIM_THRESHOLD, _THRESHOLD))
