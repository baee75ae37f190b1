"""A quiet progress bar: drawn on a terminal's stderr, silent everywhere else.

Long commands (fit, explain, replay, report) tell the user how far they are; output
redirected to a file or a pipe, and ``--quiet`` runs, stay free of bar characters.
"""

import contextlib
import sys
import time

__all__ = ["Progress", "bar"]

_WIDTH = 28
# redraw at most this often (seconds): a terminal flooded with redraws slows the work
_MIN_REDRAW = 0.1


class Progress:
    """Counts finished steps and, when ``visible``, redraws a one-line bar.

    The object is also a plain callback: ``progress(2)`` is ``progress.update(2)``.

    Parameters
    ----------
    total : int
        Steps expected (at least 1).
    label : str
        Text before the bar.
    stream : file-like
        Where the bar is drawn (stderr).
    visible : bool
        False draws nothing (the counts are still kept).
    """

    def __init__(self, total, label, stream, visible):
        self.total = max(int(total), 1)
        self.label = str(label)
        self.done = 0
        self._stream = stream
        self._visible = bool(visible)
        self._last_draw = 0.0
        self._started = time.perf_counter()

    def update(self, n=1):
        """Mark ``n`` more steps finished."""
        self.done = min(self.done + int(n), self.total)
        now = time.perf_counter()
        if self._visible and (now - self._last_draw >= _MIN_REDRAW or self.done == self.total):
            self._draw(now)

    __call__ = update

    def _draw(self, now):
        share = self.done / self.total
        filled = int(round(share * _WIDTH))
        elapsed = now - self._started
        line = (
            f"\r{self.label} |{'#' * filled}{'.' * (_WIDTH - filled)}| "
            f"{self.done}/{self.total} {elapsed:5.1f} s"
        )
        self._stream.write(line)
        self._stream.flush()
        self._last_draw = now

    def _finish(self):
        if self._visible:
            self._draw(time.perf_counter())
            self._stream.write("\n")
            self._stream.flush()


def _is_terminal(stream):
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # closed or replaced streams
        return False


@contextlib.contextmanager
def bar(total, label, quiet=False, stream=None):
    """Context manager yielding a :class:`Progress` for ``total`` steps.

    Parameters
    ----------
    total : int
        Steps expected.
    label : str
        Text before the bar, e.g. ``"report"``.
    quiet : bool, default=False
        True draws nothing.
    stream : file-like or None, default=None
        Where to draw; None: ``sys.stderr``. Nothing is drawn unless it is a terminal.

    Yields
    ------
    Progress
        Call ``update(n=1)`` (or the object itself) after each step.

    Examples
    --------
    >>> with bar(3, "work", quiet=True) as progress:
    ...     for _ in range(3):
    ...         progress.update()
    >>> progress.done
    3
    """
    stream = sys.stderr if stream is None else stream
    progress = Progress(total, label, stream, visible=not quiet and _is_terminal(stream))
    try:
        yield progress
    finally:
        progress._finish()
