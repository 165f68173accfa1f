"""The memory budget: how much working memory a grid needs, and refusing one that would not
fit before allocating it."""

from __future__ import annotations

import os

from ..errors import MemoryBudgetError

__all__ = ["ROUTE_BYTES_PER_CELL", "available_memory_bytes", "format_bytes", "check_memory"]

#: Working bytes per cell that ``route`` needs at its peak (measured in bench/, see RESULTS.md).
ROUTE_BYTES_PER_CELL = 45



def available_memory_bytes() -> int | None:
    """Memory the OS reports as available to new allocations, or None if unknown."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def format_bytes(n) -> str:
    """A byte count in a readable binary unit: '512 bytes', '87.9 KiB', '1.5 GiB'."""
    n = float(n)
    if n < 1024:
        return f"{int(n)} bytes"
    for unit in ("KiB", "MiB", "GiB", "TiB"):
        n /= 1024.0
        if n < 1024 or unit == "TiB":
            return f"{n:.1f} {unit}"


def check_memory(ncells: int, bytes_per_cell: int = ROUTE_BYTES_PER_CELL, what="routing"):
    """Refuse, before allocating, a job whose working memory exceeds what is available."""
    need = int(ncells) * bytes_per_cell
    have = available_memory_bytes()
    if have is not None and need > have:
        raise MemoryBudgetError(
            f"{what} a grid of {ncells:,} cells needs about {format_bytes(need)} of working "
            f"memory but only {format_bytes(have)} is available; clip the DEM to the area "
            "of interest, coarsen it, or run on a machine with more memory")
    return need
