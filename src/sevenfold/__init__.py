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
    """Ask numpy for ordinary 4 kB pages instead of transparent huge pages on a machine that
    hands its free memory back to a hypervisor (:func:`reports_free_pages`), unless the
    environment already says (``NUMPY_MADVISE_HUGEPAGE``; read when numpy loads).

    There, free memory goes back to the host about 2 s after it is freed, and the first touch
    of a fresh process's huge pages then faults in the host as well: a 1000:1 column job took
    1.18 times as long at 128^3 and 1.37 times at 256^3 with huge pages as with small ones
    (medians of four); on memory the host still backed, what a machine without free-page
    reporting always has, huge pages took 0.76 and 0.86 times as long. No fault stalled on
    compaction or fell back either way (benchmarks/RESULTS_PAGES.md). Elsewhere numpy's huge
    pages are kept. The command calls this for the commands that run a job in a fresh
    process, not for ``worker``, whose slots keep their memory from job to job and run faster
    on huge pages (benchmarks/RESULTS_HUGEPAGES.md).
    """
    import os

    if "NUMPY_MADVISE_HUGEPAGE" not in os.environ and reports_free_pages():
        os.environ["NUMPY_MADVISE_HUGEPAGE"] = "0"


# virtio device 5 is a memory balloon; feature bit 5 (VIRTIO_BALLOON_F_REPORTING, Linux's
# include/uapi/linux/virtio_balloon.h) reports free pages to the hypervisor
VIRTIO_DEVICES = "/sys/bus/virtio/devices"
BALLOON_DEVICE = 5
REPORTING_BIT = 5


def reports_free_pages(devices: str = VIRTIO_DEVICES) -> bool:
    """Whether this machine is a virtual machine whose balloon device, bound to its driver,
    reports free pages to the hypervisor (``devices``: the virtio devices' sysfs folder, each
    with ``device``, the negotiated ``features`` as a string of 0s and 1s, and ``driver``).
    Only virtio balloons are recognised (KVM, QEMU, Firecracker); on another hypervisor that
    takes free memory back, set ``NUMPY_MADVISE_HUGEPAGE=0`` yourself."""
    import os

    try:
        names = os.listdir(devices)
    except OSError:
        return False
    for name in names:
        folder = os.path.join(devices, name)
        try:
            with open(os.path.join(folder, "device")) as f:
                device = int(f.read().strip(), 16)
            with open(os.path.join(folder, "features")) as f:
                features = f.read().strip()
        except (OSError, ValueError):
            continue
        if (device == BALLOON_DEVICE and features[REPORTING_BIT:REPORTING_BIT + 1] == "1"
                and os.path.exists(os.path.join(folder, "driver"))):
            return True
    return False
