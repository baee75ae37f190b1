"""A quiet progress bar (tqdm): drawn on a terminal's stderr, silent everywhere else.

Long commands (fit, fill, next, explain, replay, report) tell the user how far they are; output
redirected to a file or a pipe, and ``--quiet`` runs, stay free of bar characters.
"""

import contextlib
import sys

from tqdm import tqdm

__all__ = ["Progress", "bar", "expect_steps", "step"]

# redraw at most this often (seconds): a terminal flooded with redraws slows the work
# (common practice, no source; tqdm's own default)
_MIN_REDRAW = 0.1


class Progress:
    """Counts finished steps and, when ``visible``, shows them as a tqdm bar.

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
        self._bar = tqdm(
            total=self.total, desc=self.label, file=stream, disable=not visible,
            mininterval=_MIN_REDRAW, leave=True, unit="step",
        )

    def expect(self, total):
        """Set the number of steps expected, once it is known (at least 1)."""
        self.total = max(int(total), 1, self.done)
        self._bar.total = self.total
        self._bar.refresh()

    def update(self, n=1):
        """Mark ``n`` more steps finished (never past the total)."""
        step = min(self.done + int(n), self.total) - self.done
        self.done += step
        if step:
            self._bar.update(step)

    __call__ = update

    def close(self):
        """Draw the final state and end the bar's line."""
        self._bar.close()


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
        progress.close()


def step(progress, n=1):
    """Tell ``progress`` that ``n`` more steps are done: a :class:`Progress`, any object
    with ``update(n)``, a plain callable taking ``n``, or None (nothing)."""
    if progress is None:
        return
    update = getattr(progress, "update", None)
    (update if callable(update) else progress)(n)


def expect_steps(progress, total):
    """Tell ``progress`` how many steps to expect, if it can be told (``expect(total)``)."""
    expect = getattr(progress, "expect", None)
    if callable(expect):
        expect(total)
