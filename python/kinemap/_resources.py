"""Thread counts and memory estimates shared by the engines."""

from __future__ import annotations

import os

from .errors import InvalidInputError


def resolve_threads(threads) -> int | None:
    """The worker-thread count: the argument, else ``KINEMAP_NUM_THREADS``, else all cores (None)."""
    if threads is None:
        env = os.environ.get("KINEMAP_NUM_THREADS")
        if env is None or env.strip() == "":
            return None
        try:
            threads = int(env)
        except ValueError:
            raise InvalidInputError(f"KINEMAP_NUM_THREADS must be a whole number, got {env!r}") from None
        where = "KINEMAP_NUM_THREADS"
    else:
        where = "`threads`"
    if isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
        raise InvalidInputError(f"{where} must be a whole number >= 1, got {threads!r}")
    return int(threads)


def available_memory() -> int:
    """Bytes of memory available to this process now (MemAvailable on Linux)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return 1 << 34


def human_bytes(n: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"):
        if abs(n) < 1024 or unit == "EiB":
            return f"{n:.1f} {unit}" if unit != "B" else f"{int(n)} B"
        n /= 1024.0
    return f"{n:.1f} EiB"


def check_fits(n_bytes: float, what: str) -> None:
    """Refuse, before allocating, an output of `n_bytes` that cannot fit in available memory."""
    avail = available_memory()
    if n_bytes > 0.8 * avail:
        raise InvalidInputError(
            f"{what} would need about {human_bytes(n_bytes)}, but only {human_bytes(avail)} of "
            "memory is available; use a smaller grid (fewer points) or split it into pieces"
        )
