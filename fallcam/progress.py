"""A progress bar on stderr for commands that read clips, as a ``callback(n_done, n_total)``.

The stages report progress through a plain callable (``tracker.track_clip(progress=...)``,
``fallcam.analyze.analyze_clip(progress=...)``, :func:`fallcam.batch.run_batch`), so they never
import tqdm or know about terminals. :func:`progress_bar` makes such a callable: a tqdm bar on
stderr when stderr is a terminal, or a silent callable when it is not (pipes, log files, CI) or
when the user asked for ``--quiet``.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import TextIO

from tqdm import tqdm

__all__ = ["ProgressBar", "ProgressCallback", "progress_bar"]

ProgressCallback = Callable[[int, int], None]
"""``callback(n_done, n_total)``: ``n_done`` units finished out of ``n_total`` (0 if unknown)."""


class ProgressBar:
    """Callable progress sink; draws a tqdm bar when enabled, does nothing otherwise.

    Parameters
    ----------
    description : str
        Short label in front of the bar (e.g. the clip name).
    unit : str
        Name of one unit of work ("frame", "clip").
    enabled : bool
        Draw the bar. When ``False`` every call is a no-op.
    stream : text stream
        Where the bar is drawn (stderr).
    min_interval_s : float
        Shortest time between two redraws, s.

    Notes
    -----
    Use as a context manager (or call :meth:`close`) so the bar's line is finished. Calls with
    ``n_done`` going backwards (a second pass over a clip) restart the count on the same bar.
    """

    def __init__(self, description: str, *, unit: str, enabled: bool, stream: TextIO,
                 min_interval_s: float = 0.1) -> None:
        self.enabled = enabled
        self._min_interval_s = min_interval_s
        self._bar: tqdm | None = None
        self._description = description
        self._unit = unit
        self._stream = stream

    def __call__(self, n_done: int, n_total: int) -> None:
        """Report that ``n_done`` of ``n_total`` units are finished (``n_total`` 0 = unknown)."""
        if not self.enabled:
            return
        total = int(n_total) if n_total and n_total > 0 else None
        if self._bar is None:
            self._bar = tqdm(total=total, desc=self._description, unit=self._unit,
                             file=self._stream, leave=False, dynamic_ncols=True,
                             mininterval=self._min_interval_s)
        if total is not None and self._bar.total != total:
            self._bar.total = total
            self._bar.refresh()
        step = max(0, int(n_done)) - self._bar.n
        if step < 0:  # a new pass over the clip: start the count again
            self._bar.reset(total=self._bar.total)
            step = max(0, int(n_done))
        if step:
            self._bar.update(step)  # tqdm redraws at most every min_interval_s

    def close(self) -> None:
        """Remove the bar from the terminal (idempotent)."""
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self) -> ProgressBar:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()


def progress_bar(description: str, *, unit: str = "frame", quiet: bool = False,
                 stream: TextIO | None = None, min_interval_s: float = 0.1) -> ProgressBar:
    """Make the progress callback for one piece of work.

    Parameters
    ----------
    description : str
        Label shown before the bar.
    unit : str, optional
        Unit of work, "frame" by default.
    quiet : bool, optional
        ``True`` for ``--quiet``: no bar.
    stream : text stream, optional
        Where to draw; ``sys.stderr`` (looked up at call time) by default.
    min_interval_s : float, optional
        Shortest time between two redraws, s (0.1 by default; 0 draws every call).

    Returns
    -------
    ProgressBar
        A ``callback(n_done, n_total)``; it draws only when ``stream`` is a terminal and
        ``quiet`` is false.
    """
    out = sys.stderr if stream is None else stream
    is_terminal = bool(getattr(out, "isatty", lambda: False)())
    return ProgressBar(description, unit=unit, enabled=is_terminal and not quiet, stream=out,
                       min_interval_s=min_interval_s)
