"""Progress reports on stderr: a tqdm bar with ETA on a terminal, plain log lines otherwise.

On a terminal a bar shows rays (stills) or frames (sequences) with the
estimated time left; in a Jupyter notebook the same bar is a notebook widget
(``tqdm.auto`` picks the kind).  When stderr is not a terminal (a log file, a batch job),
a sequence writes one line per finished frame and a still writes nothing, so
logs stay readable.  ``quiet`` silences both.
"""

import sys
import time

__all__ = ["RayProgress", "FrameProgress"]


def _is_terminal(stream):
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def _in_notebook():
    """True inside a Jupyter kernel, whose stderr is no terminal but can show a widget bar."""
    shell = getattr(sys.modules.get("IPython"), "get_ipython", lambda: None)()
    return type(shell).__name__ == "ZMQInteractiveShell"


def _shows_bar(stream):
    return _is_terminal(stream) or _in_notebook()


class RayProgress:
    """``progress(done, total)`` callback of :func:`render.geodesics.tracing.trace_bundle` for a still."""

    def __init__(self, quiet=False, stream=None, description="tracing"):
        self.stream = stream or sys.stderr
        self.enabled = not quiet and _shows_bar(self.stream)
        self.description = description
        self._bar = None

    def __call__(self, done, total):
        if not self.enabled:
            return
        if self._bar is None:
            from tqdm.auto import tqdm

            self._bar = tqdm(total=total, desc=self.description, unit="ray", unit_scale=True,
                             file=self.stream, leave=False, dynamic_ncols=True)
        self._bar.update(done - self._bar.n)

    def close(self):
        if self._bar is not None:
            self._bar.close()
            self._bar = None


class _CountProgress:
    """A bar (tqdm.auto: a widget in notebooks) or one line per finished item, with the
    time left; ``progress(done, total, None)`` starts it (``done`` items already
    finished by an earlier run), ``progress(done, total, item)`` counts one more."""

    noun = "items"
    unit = "item"

    def __init__(self, quiet=False, stream=None):
        self.stream = stream or sys.stderr
        self.quiet = quiet
        self.terminal = _shows_bar(self.stream)
        self._bar = None
        self._started = None
        self._first_done = 0

    def __call__(self, done, total, item):
        if self.quiet:
            return
        if item is None:
            self._started = time.monotonic()
            self._first_done = done
            if self.terminal:
                from tqdm.auto import tqdm

                self._bar = tqdm(total=total, initial=done, desc=self.noun, unit=self.unit,
                                 file=self.stream, dynamic_ncols=True)
            elif done:
                print(f"resuming: {done}/{total} {self.noun} already finished",
                      file=self.stream, flush=True)
            return
        if self._bar is not None:
            self._bar.update(done - self._bar.n)
            return
        elapsed = time.monotonic() - self._started
        new = done - self._first_done
        left = elapsed / new * (total - done) if new else float("nan")
        print(self.line(done, total, item, left), file=self.stream, flush=True)

    def line(self, done, total, item, left):
        raise NotImplementedError

    def close(self):
        if self._bar is not None:
            self._bar.close()
            self._bar = None


class FrameProgress(_CountProgress):
    """``progress(done, total, result)`` callback of :func:`render.api.render_sequence`."""

    noun = "frames"
    unit = "frame"

    def line(self, done, total, result, left):
        return (f"frame {result.index} done ({done}/{total}) in {result.seconds:.2f} s; "
                f"eta {left:.0f} s")


class GridProgress(_CountProgress):
    """``progress(done, total, seconds)`` callback of a table model's grid (:mod:`render.tables.grid`).

    A bar with the time left on a terminal, else one line per point with the
    estimate; ``seconds`` is None at the start (``done`` points already finished
    by an earlier run).
    """

    noun = "grid points"
    unit = "point"

    def line(self, done, total, seconds, left):
        return f"grid point {done}/{total} done in {seconds:.2f} s; about {left:.0f} s left"
