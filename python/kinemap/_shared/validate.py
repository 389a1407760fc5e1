"""Argument validators with messages that name the argument and say what is expected.

They accept NumPy scalars wherever Python numbers are accepted (``np.int64(2)``,
``np.float32(1e-3)``), refuse booleans where numbers are meant, and never let a huge integer
escape as an ``OverflowError``.
"""

from __future__ import annotations

import math
import numbers
import os

import numpy as np

from ..errors import InvalidInputError

#: Worker threads allowed per core before a thread count is refused as a mistake.
THREADS_PER_CORE_LIMIT = 8


def whole_number(value, name: str, *, minimum: int | None = None, maximum: int | None = None) -> int:
    """`value` as an int: Python or NumPy integers (not bool, not float), within the bounds.

    Raises
    ------
    InvalidInputError
        Naming `name`, for anything else.
    """
    want = "a whole number" + (f" >= {minimum}" if minimum is not None else "") + \
        (f" and <= {maximum}" if maximum is not None and minimum is not None else
         f" <= {maximum}" if maximum is not None else "")
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Integral):
        raise InvalidInputError(f"`{name}` must be {want}, got {value!r}")
    v = int(value)
    if (minimum is not None and v < minimum) or (maximum is not None and v > maximum):
        raise InvalidInputError(f"`{name}` must be {want}, got {v}")
    return v


def real_number(value, name: str, *, minimum: float | None = None, maximum: float | None = None,
                exclusive_minimum: bool = False, exclusive_maximum: bool = False) -> float:
    """`value` as a finite float: Python or NumPy reals (not bool, not complex), within bounds.

    Raises
    ------
    InvalidInputError
        Naming `name`, for anything else (including NaN and infinities).
    """
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise InvalidInputError(f"`{name}` must be a real number, got {value!r}")
    try:
        v = float(value)
    except OverflowError:
        raise InvalidInputError(f"`{name}` is too large for a float: {value!r}") from None
    if not math.isfinite(v):
        raise InvalidInputError(f"`{name}` must be finite, got {v!r}")
    if minimum is not None and (v <= minimum if exclusive_minimum else v < minimum):
        raise InvalidInputError(f"`{name}` must be {'>' if exclusive_minimum else '>='} {minimum:g}, got {v:g}")
    if maximum is not None and (v >= maximum if exclusive_maximum else v > maximum):
        raise InvalidInputError(f"`{name}` must be {'<' if exclusive_maximum else '<='} {maximum:g}, got {v:g}")
    return v


def flag(value, name: str) -> bool:
    """A true/false option (Python or NumPy bool only)."""
    if not isinstance(value, (bool, np.bool_)):
        raise InvalidInputError(f"`{name}` must be True or False, got {value!r}")
    return bool(value)


def one_of(value, name: str, allowed) -> str:
    """A text option that must be one of `allowed`."""
    if not isinstance(value, str) or value not in allowed:
        raise InvalidInputError(f"`{name}` must be one of {', '.join(map(repr, allowed))}, got {value!r}")
    return value


def cores() -> int:
    """CPU cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def thread_count(threads) -> int | None:
    """The worker-thread count: the argument, else ``KINEMAP_NUM_THREADS``, else None (all cores).

    Counts above ``THREADS_PER_CORE_LIMIT`` × cores are refused as a mistake: they only add
    overhead to a compute-bound run.
    """
    where = "threads"
    if threads is None:
        env = os.environ.get("KINEMAP_NUM_THREADS")
        if env is None or env.strip() == "":
            return None
        try:
            threads = int(env)
        except ValueError:
            raise InvalidInputError(f"KINEMAP_NUM_THREADS must be a whole number, got {env!r}") from None
        where = "KINEMAP_NUM_THREADS"
    limit = THREADS_PER_CORE_LIMIT * cores()
    n = whole_number(threads, where, minimum=1)
    if n > limit:
        raise InvalidInputError(
            f"`{where}` = {n} is more than {THREADS_PER_CORE_LIMIT} threads per core on this machine "
            f"({cores()} cores, limit {limit}); the sums are compute-bound, so use at most the core count")
    return n


def real_array(value, name: str, *, shape: tuple | None = None, finite: bool = True) -> np.ndarray:
    """A float64 array; complex, object and non-numeric input is refused (never silently cast).

    `shape` may use None for any length, e.g. ``(None, 3)``.
    """
    try:
        a = np.asarray(value)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"`{name}` must be an array of real numbers: {exc}") from None
    if a.dtype.kind == "c":
        raise InvalidInputError(f"`{name}` must be real, got a complex array (its imaginary part would be lost)")
    if a.dtype.kind not in "biuf":
        try:
            a = a.astype(np.float64)
        except (TypeError, ValueError):
            raise InvalidInputError(f"`{name}` must be an array of real numbers, got dtype {a.dtype}") from None
        if a.dtype.kind == "c":
            raise InvalidInputError(f"`{name}` must be real, got complex values")
    a = np.asarray(a, dtype=np.float64)
    if shape is not None:
        ok = a.ndim == len(shape) and all(s is None or s == n for s, n in zip(shape, a.shape))
        if not ok:
            want = "(" + ", ".join("N" if s is None else str(s) for s in shape) + ")"
            raise InvalidInputError(f"`{name}` must have shape {want}, got {a.shape}")
    if finite and a.size and not np.isfinite(a).all():
        flat = np.flatnonzero(~np.isfinite(a.reshape(a.shape[0], -1)).all(axis=1)) if a.ndim > 1 else \
            np.flatnonzero(~np.isfinite(a))
        raise InvalidInputError(f"`{name}` has non-finite values (first at index {int(flat[0])})")
    return a


def file_name(path, name: str = "path") -> str:
    """A file name as text that the HDF5 library and the file system both accept.

    Names that are not valid UTF-8 (undecodable bytes) are refused before any work is done.
    """
    if isinstance(path, bytes):
        try:
            path = path.decode("utf-8")
        except UnicodeDecodeError:
            raise InvalidInputError(f"`{name}` {path!r} is not valid UTF-8; rename the file") from None
    if not isinstance(path, (str, os.PathLike)):
        raise InvalidInputError(f"`{name}` must be a file path, got {type(path).__name__}")
    text = os.fspath(path)
    if isinstance(text, bytes):
        return file_name(text, name)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        shown = text.encode("utf-8", "surrogateescape")
        raise InvalidInputError(f"`{name}` {shown!r} is not valid UTF-8; rename the file or folder") from None
    if "\x00" in text:
        raise InvalidInputError(f"`{name}` contains a NUL character")
    if not text:
        raise InvalidInputError(f"`{name}` is empty")
    return text


__all__ = ["whole_number", "real_number", "flag", "one_of", "thread_count", "cores", "real_array",
           "file_name", "THREADS_PER_CORE_LIMIT"]
