"""Progress reports: a tqdm bar (``progress=True``), a callable(done, total), or nothing."""

from __future__ import annotations

from ..errors import InvalidInputError


def check_progress(progress) -> None:
    """Refuse anything but True, False, None or a callable."""
    if not (progress in (True, False, None) or callable(progress)):
        raise InvalidInputError(f"`progress` must be True, False or a callable(done, total), got {progress!r}")


class Progress:
    """Counts units of work (atom–q pairs, frames, blocks) and reports them.

    Parameters
    ----------
    progress : bool or callable
        True draws a tqdm bar; a callable receives ``(done, total)`` after each step.
    total : int
        Units expected (0 when unknown).
    unit, desc : str
        The bar's unit and label.
    """

    def __init__(self, progress, total: int = 0, *, unit: str = "pair", desc: str = "kinemap"):
        check_progress(progress)
        self.total = int(total)
        self.done = 0
        self.bar = None
        self.callback = progress if callable(progress) and progress is not True else None
        if progress is True:
            from tqdm.auto import tqdm

            self.bar = tqdm(total=self.total or None, unit=unit, unit_scale=True, desc=desc)

    def add(self, n: int) -> None:
        self.done += int(n)
        if self.bar is not None:
            self.bar.update(n)
        if self.callback is not None:
            self.callback(self.done, self.total)

    def describe(self, text: str) -> None:
        if self.bar is not None:
            self.bar.set_description(text)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


__all__ = ["Progress", "check_progress"]
