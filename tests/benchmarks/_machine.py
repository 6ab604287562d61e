"""What every benchmark records beside its figures: the machine (CPU model, core count) and versions."""

from __future__ import annotations

import os
import platform
import time
from pathlib import Path


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def machine_info() -> dict:
    """CPU model, core count, load average now (the machine may be shared), Python and numpy versions, date."""
    import numpy

    return {
        "cpu_model": cpu_model(),
        "cores": os.cpu_count(),
        "load_average_1min": os.getloadavg()[0] if hasattr(os, "getloadavg") else None,
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "date": time.strftime("%Y-%m-%d"),
    }
