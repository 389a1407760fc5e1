"""Exception classes of kinemap.

Every error kinemap raises on purpose is a :class:`KinemapError`. Bad input (wrong shapes,
non-finite coordinates, unknown species, out-of-range parameters, outputs too large to fit in
memory) raises :class:`InvalidInputError`, which is also a :class:`ValueError`, so existing
``except ValueError`` handlers keep working. File trouble raises :class:`OSError` subclasses
(or :class:`ModelFileError` for files that exist but do not hold what kinemap needs).
"""

from __future__ import annotations


class KinemapError(Exception):
    """Base class of every error raised on purpose by kinemap."""


class InvalidInputError(KinemapError, ValueError):
    """An argument or input value is not acceptable; the message names it and where."""


class ModelFileError(KinemapError, OSError):
    """A model or map file exists but lacks what is needed, or is corrupt; the message names
    the file and the dataset path."""


__all__ = ["KinemapError", "InvalidInputError", "ModelFileError"]
