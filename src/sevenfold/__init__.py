"""sevenfold: steady -div(k grad u) = f on 3D box grids, from job file to chunked zarr."""

__version__ = "0.1.0"

# The environment variables that set the BLAS libraries' thread counts (OpenBLAS, which numpy's
# and scipy's wheels carry, and MKL).
BLAS_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def one_blas_thread() -> None:
    """Ask the BLAS libraries for one thread each, unless the environment already says.

    Takes effect for a library loaded after the call (numpy's OpenBLAS loads with numpy), so
    the command line calls it before its first import of numpy; a worker's slot processes get
    the same through their environment. Our kernels run on numba's threads, one per core; a
    BLAS call (a norm, a sparse LU's dense blocks, the coarsest level's factor) wakes BLAS's
    own threads, which then spin beside them: warm gmg solves took 1.1-1.3 times as long at
    32^3 to 128^3 and 1.02-1.03 times at 256^3 (benchmarks/RESULTS_BLAS_THREADS.md).
    """
    import os

    for name in BLAS_THREAD_VARIABLES:
        os.environ.setdefault(name, "1")


def small_pages() -> None:
    """Ask numpy for ordinary 4 kB pages instead of transparent huge pages, unless the
    environment already says (``NUMPY_MADVISE_HUGEPAGE``; read when numpy loads).

    numpy advises huge pages on every large array; where Linux then compacts memory on a page
    fault to find 2 MB of contiguous memory (transparent_hugepage "defrag" on madvise, a common
    default), the first touch of a fresh process's arrays stalls on a host whose memory other
    processes have fragmented: whole 256^3 runs took 0.70-0.83 times as long (median of five)
    with small pages, their assembly and set-up half as long. A process that runs job after
    job (a worker's slot) gets its freed huge pages back without compaction and then runs
    faster on them, so the command calls this for the commands that run a job in a fresh
    process, not for ``worker`` (benchmarks/RESULTS_HUGEPAGES.md).
    """
    import os

    os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")
