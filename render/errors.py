"""Error types of nullray: each carries one line for the user.

The command line prints the message after ``nullray: error:`` and exits with status 2
(bad input, refused outputs) or 1 (a failure while running: a write that failed, a
worker that died).  This module imports nothing of :mod:`render`, so every room can
raise these without importing the room that reports them.
"""

__all__ = ["SceneError", "UsageError", "OutputExists", "OutputFolderError", "OutputWriteError",
           "SequenceFolderError", "SchedulerError", "WorkerLostError", "BAD_INPUT_ERRORS",
           "RUN_ERRORS", "NullrayWarning", "Terminated"]


class SceneError(ValueError):
    """A scene value that cannot be used; the message is one line for the user."""


class OutputExists(FileExistsError):
    """An output file is already there and overwriting was not asked for."""


class SequenceFolderError(Exception):
    """The sequence folder holds something else; the message is one line."""


class SchedulerError(Exception):
    """The Dask scheduler cannot be reached or used; the message is one line."""


class UsageError(ValueError):
    """A command-line option that cannot be used as given (a worker count, an option
    that the scene cannot take); the message is one line."""


class OutputFolderError(Exception):
    """The output folder cannot be created or written; the message is one line."""


class OutputWriteError(OSError):
    """Writing an output failed part-way (a full disk, a lost mount, no permission).

    Nothing is left under the final name (:func:`render.output.files.atomic_write`);
    the message names the file and the system's reason in one line.
    """


class WorkerLostError(RuntimeError):
    """A worker process or cluster worker died while rendering; the message is one line."""


class TableIncomplete(RuntimeError):
    """Some grid points of a table model failed; the finished ones are kept (one line)."""


# Refusals before any work (exit status 2) and failures while running (exit status 1).
BAD_INPUT_ERRORS = (SceneError, UsageError, OutputExists, OutputFolderError, SequenceFolderError,
                    SchedulerError)
RUN_ERRORS = (OutputWriteError, WorkerLostError, TableIncomplete)


class NullrayWarning(UserWarning):
    """A result that could mislead (ignored keys, coarse sampling...); the command line
    prints each as one line ``nullray: warning: ...`` instead of Python's own display."""


class Terminated(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C: work stops at a clean point, temporaries are removed,
    and the command exits with status 143 (128 + 15)."""

