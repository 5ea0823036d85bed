"""Reading the user's input files safely: regular files only, with a byte cap.

A scene file, an emission profile table and a sky panorama are named by the
user (or by a scene someone else wrote), so a name may point at ``/dev/zero``,
a FIFO that nobody writes to, a socket or a folder.  Everything that reads such
a file goes through here:

* the kind is checked with :func:`os.stat` *before* opening (stat never blocks,
  where opening a FIFO for reading waits for a writer);
* the file is opened with ``O_NONBLOCK`` and checked again with
  :func:`os.fstat` on the open descriptor, so a file swapped for a FIFO between
  the two checks cannot block or stream forever either;
* at most ``cap`` bytes are accepted: the size is checked from ``fstat`` and
  the read itself stops one byte past the cap.

Errors are :class:`InputFileError` with one line naming the file and what is
wrong with it, never the file's contents.  This module imports nothing of
:mod:`render`, so every room can use it.
"""

import os
import stat
from contextlib import contextmanager

__all__ = ["InputFileError", "check_regular_file", "read_bounded", "open_bounded", "describe_size"]


class InputFileError(ValueError):
    """An input file that is not a regular file, is too large or cannot be read (one line)."""


_KINDS = ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
          (stat.S_ISSOCK, "a socket"), (stat.S_ISCHR, "a character device"),
          (stat.S_ISBLK, "a block device"))


def _kind_problem(mode):
    for is_kind, name in _KINDS:
        if is_kind(mode):
            return f"is {name}, not a regular file"
    return None if stat.S_ISREG(mode) else "is not a regular file"


def describe_size(size):
    """A byte count as the user reads it.

    Examples
    --------
    >>> describe_size(300), describe_size(8 * 1024 * 1024)
    ('300 bytes', '8 MiB')
    """
    for unit, scale in (("GiB", 1024 ** 3), ("MiB", 1024 ** 2), ("KiB", 1024)):
        if size >= scale:
            return f"{size / scale:g} {unit}"
    return f"{size} bytes"


def check_regular_file(path):
    """The :func:`os.stat` result of ``path`` if it is a regular file; else InputFileError.

    Symbolic links are followed (a link to a regular file is fine); the check
    never opens the file, so it cannot block on a FIFO.
    """
    try:
        info = os.stat(path)
    except OSError as exc:
        raise InputFileError(f"cannot be read: {exc.strerror or exc}") from None
    problem = _kind_problem(info.st_mode)
    if problem:
        raise InputFileError(problem)
    return info


@contextmanager
def open_bounded(path, cap):
    """Open a regular file of at most ``cap`` bytes for binary reading, without blocking.

    Parameters
    ----------
    path : str or Path
    cap : int
        Largest size accepted, in bytes.

    Yields
    ------
    file object
        Opened in ``"rb"`` mode; the caller must not read more than ``cap``
        bytes from it (the size was checked on the open descriptor).

    Raises
    ------
    InputFileError
        Not a regular file, larger than ``cap``, or unreadable.
    """
    check_regular_file(path)
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOCTTY", 0))
    except OSError as exc:
        raise InputFileError(f"cannot be read: {exc.strerror or exc}") from None
    try:
        info = os.fstat(fd)
        problem = _kind_problem(info.st_mode)
        if problem:
            raise InputFileError(problem)
        if info.st_size > cap:
            raise InputFileError(f"is {info.st_size} bytes; at most {cap} bytes "
                                 f"({describe_size(cap)}) are read")
        # A regular file never blocks, so the flag only mattered for the open itself.
        os.set_blocking(fd, True)
        handle = os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise
    with handle:
        yield handle


def read_bounded(path, cap):
    """The bytes of a regular file of at most ``cap`` bytes (:func:`open_bounded`).

    The read stops one byte past the cap, so a file that grows while it is
    read is refused instead of filling memory.

    Examples
    --------
    >>> import os, tempfile
    >>> fd, name = tempfile.mkstemp(); os.write(fd, b"r,e\\n"); os.close(fd)
    4
    >>> read_bounded(name, 100)
    b'r,e\\n'
    >>> read_bounded("/dev/zero", 100)
    Traceback (most recent call last):
    ...
    render.guards.reading.InputFileError: is a character device, not a regular file
    >>> os.unlink(name)
    """
    with open_bounded(path, cap) as handle:
        try:
            data = handle.read(cap + 1)
        except OSError as exc:
            raise InputFileError(f"cannot be read: {exc.strerror or exc}") from None
    if len(data) > cap:
        raise InputFileError(f"grew past {describe_size(cap)} while it was read")
    return data
