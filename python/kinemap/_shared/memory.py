"""How much memory this process may still use, and refusals made before allocating.

The estimate is the smallest of: the machine's available memory (``MemAvailable``), what
the process's own address-space limit leaves (``RLIMIT_AS`` minus the current virtual size,
as set by ``ulimit -v``), and what its control group leaves (cgroup v2 ``memory.max`` minus
``memory.current``, or the v1 equivalents, as set by batch schedulers and containers).
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import InvalidInputError

_UNLIMITED = 1 << 62


def _meminfo_available() -> int:
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


def _address_space_left() -> int:
    try:
        import resource
    except ImportError:  # pragma: no cover - not on POSIX
        return _UNLIMITED
    soft, _hard = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY or soft < 0:
        return _UNLIMITED
    used = 0
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmSize:"):
                    used = int(line.split()[1]) * 1024
                    break
    except OSError:
        pass
    return max(0, soft - used)


def _read_int(path: Path) -> int | None:
    try:
        text = path.read_text().strip()
    except OSError:
        return None
    if text in ("max", ""):
        return None
    try:
        return int(text)
    except ValueError:
        return None


def _cgroup_left() -> int:
    """Memory the process's control group may still take (cgroup v2, else v1)."""
    left = _UNLIMITED
    try:
        lines = Path("/proc/self/cgroup").read_text().splitlines()
    except OSError:
        return left
    root = Path("/sys/fs/cgroup")
    for line in lines:
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        _id, controllers, rel = parts
        rel = rel.lstrip("/")
        if controllers == "":  # v2 unified hierarchy: check every level up to the root
            d = root / rel
            while True:
                limit = _read_int(d / "memory.max")
                if limit is not None:
                    cur = _read_int(d / "memory.current") or 0
                    left = min(left, max(0, limit - cur))
                if d == root or root not in d.parents:
                    break
                d = d.parent
        elif "memory" in controllers.split(","):
            d = root / "memory" / rel
            limit = _read_int(d / "memory.limit_in_bytes")
            if limit is not None and limit < _UNLIMITED:
                cur = _read_int(d / "memory.usage_in_bytes") or 0
                left = min(left, max(0, limit - cur))
    return left


def available_memory() -> int:
    """Bytes this process can still allocate: the smallest of the machine's, its own
    address-space limit's and its control group's allowance (see the module notes)."""
    return int(min(_meminfo_available(), _address_space_left(), _cgroup_left()))


def human_bytes(n: float) -> str:
    """``1536`` → ``"1.5 KiB"``."""
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(n) < 1024 or unit == "PiB":
            return f"{n:.1f} {unit}" if unit != "B" else f"{int(n)} B"
        n /= 1024.0
    return f"{n:.1f} PiB"


def check_fits(n_bytes: float, what: str, *, fraction: float = 0.8, hint: str | None = None) -> None:
    """Refuse, before allocating, `n_bytes` for `what` when it exceeds `fraction` of what the
    process may still allocate.

    Raises
    ------
    InvalidInputError
        With the estimate, the allowance and a hint.
    """
    avail = available_memory()
    if n_bytes > fraction * avail:
        raise InvalidInputError(
            f"{what} would need about {human_bytes(n_bytes)}, but this process may only allocate "
            f"about {human_bytes(avail)} more (the smallest of free memory, `ulimit -v` and the "
            f"control group's limit); {hint or 'use fewer points or split the work into pieces'}")


__all__ = ["available_memory", "human_bytes", "check_fits"]
