"""What the machine has: available memory (bytes). No solver imports."""
from __future__ import annotations

import os


def available_memory_bytes() -> int:
    """MemAvailable from /proc/meminfo, or total physical memory as a fallback."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):  # pragma: no cover - exotic platforms
        return 8 * 1024**3
