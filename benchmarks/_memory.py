"""Peak memory of the current process, shared by the benchmark scripts."""

from __future__ import annotations

import resource


def peak_rss_mb() -> float:
    """Peak resident memory of this process, MB: ``VmHWM`` from /proc (Linux; reset at
    exec, unlike ``ru_maxrss``, which keeps the parent's peak across fork + exec), else
    ``ru_maxrss``."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
