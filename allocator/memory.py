"""Will it fit?  Available memory, and a refusal with the numbers before a large allocation.

The size of a metered file says little about the memory it needs (a 70 MB Parquet file can
hold 100 million readings); the arrays do.  So the readers estimate the bytes of every array
they are about to allocate and compare them with the memory the machine has free:

* Linux: ``MemAvailable`` of ``/proc/meminfo`` (the kernel's estimate of memory available
  for new work without swapping);
* elsewhere: ``psutil.virtual_memory().available`` when psutil is installed, Windows'
  ``GlobalMemoryStatusEx`` (available physical memory), or free physical pages
  (``os.sysconf``) where the platform reports them; when none is known nothing is refused;
* capped by the address-space limit (``RLIMIT_AS``) less what the process already maps,
  and by ``UFLS_MAX_MEMORY_MB`` when set (to keep the tool within a share of a shared
  machine).

Only what would not fit is refused: an :class:`~allocator.errors.InputError` (exit 2) that
says how much is needed and how much is available.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import os
import sys

from .errors import InputError, Problem

ENV_LIMIT = "UFLS_MAX_MEMORY_MB"
MB = 1024 * 1024
GB = 1024 * MB


def _meminfo_available() -> int | None:
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for ln in fh:
                if ln.startswith("MemAvailable:"):
                    return int(ln.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def _sysconf_available() -> int | None:
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def _psutil_available() -> int | None:
    try:
        import psutil  # optional; not a dependency

        return int(psutil.virtual_memory().available)
    except Exception:
        return None


def _windows_available() -> int | None:
    if not sys.platform.startswith("win"):
        return None

    class Status(ctypes.Structure):
        _fields_ = [("dwLength", ctypes.c_ulong), ("dwMemoryLoad", ctypes.c_ulong),
                    ("ullTotalPhys", ctypes.c_ulonglong), ("ullAvailPhys", ctypes.c_ulonglong),
                    ("ullTotalPageFile", ctypes.c_ulonglong),
                    ("ullAvailPageFile", ctypes.c_ulonglong),
                    ("ullTotalVirtual", ctypes.c_ulonglong),
                    ("ullAvailVirtual", ctypes.c_ulonglong),
                    ("ullAvailExtendedVirtual", ctypes.c_ulonglong)]

    st = Status()
    st.dwLength = ctypes.sizeof(Status)
    try:
        if ctypes.windll.kernel32.GlobalMemoryStatusEx(ctypes.byref(st)):  # type: ignore
            return int(st.ullAvailPhys)
    except (AttributeError, OSError):
        pass
    return None


def _address_space_left() -> int | None:
    """RLIMIT_AS less the current virtual size, when a limit is set."""
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    except (ImportError, OSError, ValueError):
        return None
    if soft in (resource.RLIM_INFINITY, -1):
        return None
    used = 0
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for ln in fh:
                if ln.startswith("VmSize:"):
                    used = int(ln.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return max(int(soft) - used, 0)


def env_limit_bytes(file: str) -> int | None:
    """``UFLS_MAX_MEMORY_MB`` in bytes, None when unset; a bad value is an input error."""
    raw = os.environ.get(ENV_LIMIT)
    if raw in (None, ""):
        return None
    try:
        mb = float(raw)
    except ValueError:
        mb = float("nan")
    if not 0 < mb < float("inf"):
        raise InputError([Problem(file, f"{ENV_LIMIT}='{raw}' is not a positive number of "
                                  "megabytes")])
    return int(mb * MB)


def available_bytes(file: str = "") -> tuple[int | None, str]:
    """(bytes available for new arrays or None if unknown, where the number comes from)."""
    found = []
    for probe, name in ((_meminfo_available, "MemAvailable"),
                        (_psutil_available, "available memory"),
                        (_windows_available, "available physical memory"),
                        (_sysconf_available, "free physical memory")):
        v = probe()
        if v is not None:
            found.append((v, name))
            break
    v = _address_space_left()
    if v is not None:
        found.append((v, "address-space limit"))
    v = env_limit_bytes(file)
    if v is not None:
        found.append((v, ENV_LIMIT))
    if not found:
        return None, "unknown"
    return min(found)


def require(need_bytes: int, what: str, file: str) -> None:
    """Refuse (InputError) when ``need_bytes`` is more than the memory available."""
    avail, source = available_bytes(file)
    if avail is None or need_bytes <= avail:
        return
    raise InputError([Problem(file, f"{what} would need about {need_bytes / GB:.2f} GB of "
                              f"memory, but only {avail / GB:.2f} GB is available ({source});"
                              " free memory, use a larger machine or split the study")])


# glibc mallopt parameters (malloc.h)
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_GLIBC_DEFAULT = 128 * 1024


def _libc_mallopt():
    if not sys.platform.startswith("linux"):
        return None
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        return libc.mallopt
    except (OSError, AttributeError):
        return None


@contextlib.contextmanager
def reuse_freed_memory(max_chunk_bytes: int = 64 * MB, keep_bytes: int = GB):
    """While a file is streamed, keep the memory of one batch's arrays for the next (glibc).

    glibc malloc gives arrays of more than a few MB their own mapping and returns it on
    free, so every batch would map fresh pages, which the kernel must zero first (measured
    on the 2-core machine, 3,000 feeders × 35,040 intervals from Parquet: about 500,000 page
    faults per read, against about 40,000 with these settings).  Inside the block arrays up
    to ``max_chunk_bytes`` come from the heap and up to ``keep_bytes`` of freed heap are
    kept; afterwards glibc's default thresholds are set again.  No effect elsewhere."""
    mallopt = _libc_mallopt()
    if mallopt is None:
        yield
        return
    mallopt(_M_MMAP_THRESHOLD, int(max_chunk_bytes))
    mallopt(_M_TRIM_THRESHOLD, int(keep_bytes))
    try:
        yield
    finally:
        mallopt(_M_MMAP_THRESHOLD, _GLIBC_DEFAULT)
        mallopt(_M_TRIM_THRESHOLD, _GLIBC_DEFAULT)
