"""Peak resident memory of the current process, for the benchmarks' child processes."""

from __future__ import annotations

import resource
from pathlib import Path

HERE = Path(__file__).resolve().parent


def peak_kb() -> float:
    """High-water mark of this process image's resident memory, in KiB.

    VmHWM belongs to this process image; ``ru_maxrss`` would carry over the high-water mark of
    the process this one was forked from (which may just have built the input in memory).
    """
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return float(line.split()[1])
    except OSError:
        pass
    return float(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


def child_prelude() -> str:
    """Code that makes ``peak_kb`` importable in a ``python -c`` child."""
    return f"import sys\nsys.path.insert(0, {str(HERE)!r})\nfrom peak_memory import peak_kb\n"
