"""Helpers shared by the benchmarks: peak memory of a process."""

from __future__ import annotations

import resource
import sys


def maxrss_mb() -> float:
    """``getrusage(RUSAGE_SELF).ru_maxrss`` in MB (10**6 bytes); KiB on Linux, bytes on macOS."""
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return rss * (1.0 if sys.platform == "darwin" else 1024.0) / 1e6


def peak_mb() -> float:
    """Peak RSS of this process so far, in MB (10**6 bytes).

    On Linux this is ``VmHWM`` from /proc/self/status, the high-water mark of this
    process's own address space. ``ru_maxrss`` is not used there because Linux
    carries it over from the parent through fork + exec, so a spawned child would
    report at least the parent's RSS at spawn time. Elsewhere ``ru_maxrss``.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024 / 1e6
    except OSError:
        pass
    return maxrss_mb()
