"""Writing results: atomic files published as complete sets, PNG images, NPZ data maps.

Every file is first written to a temporary name in the destination folder and
then renamed into place (``os.replace``, atomic on POSIX), so an interrupted
run never leaves a truncated file under the final name.  Existing files are
never overwritten unless the caller passes ``overwrite=True``.

Inside :func:`published_together` the renames wait: every file of the block is
written to its temporary first, and all of them are renamed at the end, under
a lock on the folder and with SIGINT and SIGTERM held back, so that a still's
PNG, NPZ and products appear together, from one run, or not at all.
Temporary names carry the run's tag (:mod:`render.guards.runs`), so that
:func:`sweep_dead_temporaries` can remove those of a run that was killed.
"""

import contextvars
import json
import os
import shutil
import signal
import tempfile
import threading
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import OutputExists, OutputWriteError
from ..guards.runs import is_dead_here, run_tag

__all__ = ["OutputExists", "atomic_path", "atomic_write", "write_png", "write_npz", "check_free",
           "published_together", "sweep_dead_temporaries"]

# The files of the innermost published_together block: [(temporary, final path, overwrite)].
_STAGED = contextvars.ContextVar("nullray_staged_files", default=None)


def check_free(paths, overwrite=False):
    """Raise :class:`OutputExists` if any path exists and ``overwrite`` is false."""
    if overwrite:
        return
    for path in paths:
        if Path(path).exists():
            raise OutputExists(f"{path} exists; pass --overwrite to replace it, or choose "
                               f"another name with --set name=...")


@contextmanager
def atomic_path(path, overwrite=False):
    """A temporary path beside ``path`` to write; renamed to ``path`` when the block ends cleanly.

    The one temporary-and-rename mechanism of every output: the temporary is a
    hidden ``.<name>.<run tag>.<random>.part`` in the destination folder (so the
    rename stays on one file system, and a killed run's leftovers are found and
    swept by :func:`sweep_dead_temporaries`), with the mode a plain ``open()``
    would give.  When the block ends cleanly the file is synced to disk and
    renamed into place, or, inside :func:`published_together`, kept for the
    set's rename at the end; on any exception it is removed, and nothing
    appears under ``path``.

    Parameters
    ----------
    path : str or Path
        Final name.
    overwrite : bool
        Replace an existing ``path``; otherwise an existing one, or one that
        appears while writing, raises :class:`OutputExists`.

    Yields
    ------
    Path
        The temporary file (created empty), for writers that need a name
        rather than a file object (an external encoder).

    Raises
    ------
    OutputWriteError
        An :class:`OSError` while writing (a full disk, a lost mount, no
        permission), as one line for the user.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> with atomic_path(folder / "note.txt") as tmp:
    ...     _ = tmp.write_text("hello")
    >>> sorted(p.name for p in folder.iterdir())
    ['note.txt']
    """
    path = Path(path)
    check_free([path], overwrite)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{run_tag()}.", suffix=".part",
                               dir=path.parent)
    try:
        try:
            # mkstemp creates the file 0600; give it the mode a plain open() would.
            umask = os.umask(0)
            os.umask(umask)
            os.fchmod(fd, 0o666 & ~umask)
        finally:
            os.close(fd)
        yield Path(tmp)
        _sync(tmp)
        staged = _STAGED.get()
        if staged is not None:
            staged.append((tmp, path, overwrite))   # renamed with its set
        elif overwrite:
            os.replace(tmp, path)
        else:
            _publish_new(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(exc, OSError) and not isinstance(exc, (OutputExists, OutputWriteError)):
            # A full disk, a lost mount, no permission: one line for the user, no traceback.
            raise OutputWriteError(f"writing {path} failed: {exc.strerror or exc}") from exc
        raise


@contextmanager
def published_together(folder):
    """Publish every file written in the block at its end, together, or none of them.

    :func:`atomic_path` (and so every writer here and in
    :mod:`render.output.products`) writes and syncs its temporary as usual, but
    the renames wait for the end of the block.  Then, under an exclusive
    ``flock`` on ``folder`` (so that two runs publishing into one folder take
    turns, and a set is never mixed from two runs) and with SIGINT and SIGTERM
    held back until the last rename, the names are checked free (for files
    written without ``overwrite``) and every temporary is renamed.  If the
    block raises, or a name is taken, every temporary is removed and nothing of
    the set is published (files of the set already renamed under a new name are
    removed again).  The lock lives on the folder itself: no lock file is left.

    Parameters
    ----------
    folder : str or Path
        The folder the files go to (it must exist when the block ends).

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> with published_together(folder):
    ...     _ = atomic_write(folder / "a.txt", lambda f: f.write(b"a"))
    ...     print(sorted(p.name for p in folder.iterdir() if not p.name.startswith(".")))
    []
    >>> sorted(p.name for p in folder.iterdir())
    ['a.txt']
    """
    staged = []
    token = _STAGED.set(staged)
    try:
        yield
    except BaseException:
        _STAGED.reset(token)
        _remove_temporaries(staged)
        raise
    _STAGED.reset(token)
    _publish_staged(Path(folder), staged)


def _publish_staged(folder, staged):
    """Rename staged temporaries to their names, all or none, under the folder's lock."""
    published = []
    try:
        with _folder_lock(folder), _stop_signals_held():
            check_free([path for _, path, overwrite in staged if not overwrite])
            for tmp, path, overwrite in staged:
                if overwrite:
                    os.replace(tmp, path)
                else:
                    _publish_new(tmp, path)
                    published.append(path)
    except BaseException as exc:
        for path in published:
            path.unlink(missing_ok=True)
        _remove_temporaries(staged)
        if isinstance(exc, OSError) and not isinstance(exc, (OutputExists, OutputWriteError)):
            raise OutputWriteError(f"publishing into {folder} failed: "
                                   f"{exc.strerror or exc}") from exc
        raise


def _remove_temporaries(staged):
    for tmp, _, _ in staged:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass


@contextmanager
def _folder_lock(folder):
    """An exclusive ``flock`` on the folder itself (no lock file to leave behind)."""
    import fcntl

    fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)   # closing releases the lock


@contextmanager
def _stop_signals_held():
    """Hold SIGINT and SIGTERM back (delivered when the block ends), so a set is renamed whole."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def sweep_dead_temporaries(folder):
    """Remove the temporaries of dead runs of this host from ``folder``; return how many.

    A run killed with SIGKILL (or by a power cut's reboot) leaves its hidden
    ``.*.part`` files and ``.nullray-tiles-*`` folders behind.  Their names
    carry the run's tag (:mod:`render.guards.runs`); those whose process no longer
    exists on this host are removed.  Temporaries of live runs, of other
    hosts, and hidden files without a tag are left alone.  A folder that does
    not exist has nothing to sweep.
    """
    swept = 0
    try:
        entries = list(os.scandir(folder))
    except (FileNotFoundError, NotADirectoryError):
        return 0
    for entry in entries:
        name = entry.name
        ours = name.startswith(".") and (name.endswith(".part")
                                         or name.startswith(".nullray-tiles-"))
        if not (ours and is_dead_here(name)):
            continue
        try:
            if entry.is_dir(follow_symlinks=False):
                shutil.rmtree(entry.path)
            else:
                os.unlink(entry.path)
            swept += 1
        except FileNotFoundError:
            pass   # another run swept it first
    return swept


def _sync(name):
    """Flush a closed file's data to disk, so that the rename never publishes a hollow file."""
    fd = os.open(name, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def atomic_write(path, write, overwrite=False):
    """Call ``write(file_object)`` on a temporary file, then rename it to ``path`` (:func:`atomic_path`)."""
    path = Path(path)
    with atomic_path(path, overwrite) as tmp:
        with open(tmp, "wb") as handle:
            write(handle)
    return path


def _publish_new(tmp, path):
    """Give ``tmp`` the name ``path`` only if no file has that name, without a race window."""
    try:
        # link() refuses an existing name atomically, where exists() + replace() would
        # leave a gap in which another process's file could be replaced.
        os.link(tmp, path)
    except FileExistsError:
        raise OutputExists(f"{path} appeared while writing; not replaced") from None
    except OSError:
        # No hard links on this file system (some FAT or network mounts): check, then rename.
        if path.exists():
            raise OutputExists(f"{path} appeared while writing; not replaced") from None
        os.replace(tmp, path)
        return
    os.unlink(tmp)


def write_png(path, pixels, overwrite=False, metadata=None):
    """Write an 8-bit grey (H, W) or RGB (H, W, 3) array as PNG, atomically."""
    from PIL import Image, PngImagePlugin

    info = PngImagePlugin.PngInfo()
    for key, value in (metadata or {}).items():
        info.add_text(str(key), str(value))
    image = Image.fromarray(np.ascontiguousarray(pixels))
    return atomic_write(path, lambda f: image.save(f, format="PNG", pnginfo=info), overwrite)


# Deflate level of each NPZ compression choice (output.npz_compression; zlib levels, 0 =
# stored).  Level 1 makes the maps of a still about as small as level 6 (within 2% in
# benchmarks/bench_output.py) in about two thirds of the time.
NPZ_COMPRESSION = {"fast": 1, "small": 9, "none": 0}


def write_npz(path, arrays, metadata, overwrite=False, compression="fast"):
    """Write arrays plus a JSON ``metadata`` string entry to an NPZ, atomically.

    ``compression`` is one of :data:`NPZ_COMPRESSION` (``np.load`` reads them all).
    Arrays that are memory maps of ``.npy`` files (the maps of a still rendered in
    tiles, :mod:`render.imaging.tiling`) are copied into the archive from their files
    in chunks by plain reads, so the write never holds them in memory.
    """
    if compression not in NPZ_COMPRESSION:
        raise ValueError(f"compression must be one of {', '.join(NPZ_COMPRESSION)}, "
                         f"got {compression!r}")
    payload = dict(arrays)
    payload["metadata"] = np.array(json.dumps(metadata, sort_keys=True, default=jsonable))
    level = NPZ_COMPRESSION[compression]
    return atomic_write(path, lambda f: _stream_npz(f, payload, level), overwrite)


STREAM_CHUNK_BYTES = 16 * 1024 * 1024


def _npy_file(array):
    """The .npy file behind a memory map of a whole ``.npy`` file (not a view of one), or None."""
    import mmap

    name = getattr(array, "filename", None)
    # Only the map np.load made has the mmap itself as its base; a slice's base is the map.
    if (isinstance(array, np.memmap) and isinstance(array.base, mmap.mmap) and name
            and str(name).endswith(".npy")):
        return name
    return None


def _stream_npz(handle, payload, level=1):
    """The NPZ layout of ``np.savez`` (one ``name.npy`` member per array), deflated at ``level``."""
    import shutil
    import zipfile

    compression = zipfile.ZIP_DEFLATED if level else zipfile.ZIP_STORED
    with zipfile.ZipFile(handle, "w", compression=compression,
                         compresslevel=level if level else None, allowZip64=True) as zf:
        for name, array in payload.items():
            with zf.open(f"{name}.npy", "w", force_zip64=True) as member:
                source = _npy_file(array)
                if source is None:
                    np.lib.format.write_array(member, np.asanyarray(array), allow_pickle=False)
                else:
                    with open(source, "rb") as npy:
                        shutil.copyfileobj(npy, member, STREAM_CHUNK_BYTES)


def jsonable(value):
    """``json.dumps`` default for numpy scalars and arrays."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def still_paths(scene_document, folder):
    """Final paths of a still's files: {kind: Path} for the kinds the scene asks for."""
    scene = scene_document
    folder = Path(folder)
    paths = {}
    if scene["output"]["png"]:
        paths["png"] = folder / f"{scene['name']}.png"
    if scene["output"]["npz"]:
        paths["npz"] = folder / f"{scene['name']}.npz"
    return paths


def write_still(result, folder="outputs", overwrite=False):
    """Write a :class:`~render.imaging.result.StillResult` as PNG and NPZ into ``folder``.

    Nothing is written if any target exists and ``overwrite`` is false.

    Returns
    -------
    dict
        {kind: Path} of the files written.
    """
    paths = still_paths(result.metadata["scene"], folder)
    check_free(paths.values(), overwrite)
    if "png" in paths:
        write_png(paths["png"], result.pixels, overwrite,
                  metadata={"Software": f"nullray {result.metadata['version']}",
                            "nullray-scene": json.dumps(result.metadata["scene"], sort_keys=True)})
    if "npz" in paths:
        # A spectrum or line table rides along as '<table>_<column>' arrays.
        columns = {f"{kind}_{name}": np.asarray(column) for kind, table in result.tables.items()
                   for name, column in table.items()}
        write_npz(paths["npz"], result.maps() | columns, result.metadata, overwrite,
                  compression=result.metadata["scene"]["output"]["npz_compression"])
    return paths
