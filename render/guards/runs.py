"""Which run made a temporary file: the run tag in temporary names, and whether that run is alive.

Every temporary nullray leaves in an output folder while it works (a
``.<name>.<tag>.<random>.part`` file, a ``.nullray-tiles-<tag>.<random>``
folder) carries the tag ``nullray-<process id>@<host name>`` of the process that
made it.  A run killed with SIGKILL cannot remove its temporaries, so the next
run sweeps those whose process is dead on this host
(:func:`render.output.files.sweep_dead_temporaries`); a temporary of a live run,
or of a run on another host sharing the folder, is never touched.  This module
imports nothing of :mod:`render`.
"""

import os
import re
import socket

__all__ = ["run_tag", "tag_owner", "is_dead_here"]

_TAG = re.compile(r"nullray-(\d+)@([A-Za-z0-9-]+)")


def _host():
    """This host's name, reduced to letters, digits and '-' so that it fits a file name."""
    return re.sub(r"[^A-Za-z0-9-]", "-", socket.gethostname())[:64] or "host"


def run_tag():
    """The tag of this process, ``nullray-<pid>@<host>`` (asked afresh: a forked worker differs).

    Examples
    --------
    >>> import os
    >>> tag_owner("." + run_tag() + ".part")[0] == os.getpid()
    True
    """
    return f"nullray-{os.getpid()}@{_host()}"


def tag_owner(name):
    """(process id, host) of the run tag in a file name, or None when it has none.

    Examples
    --------
    >>> tag_owner(".still.png.nullray-4242@lab-7.x1y2.part")
    (4242, 'lab-7')
    >>> tag_owner("still.png") is None
    True
    """
    match = _TAG.search(name)
    return (int(match.group(1)), match.group(2)) if match else None


def is_dead_here(name):
    """Whether the run tagged in ``name`` ran on this host and its process no longer exists.

    A name without a tag, a tag of another host, or a process that exists
    (including one that another user owns) all count as not dead, so a sweep
    never removes what a live run, or a run elsewhere, may still use.  A
    process id reused by an unrelated process keeps a temporary until that
    process ends: a leftover, never a loss.
    """
    owner = tag_owner(name)
    if owner is None or owner[1] != _host():
        return False
    try:
        os.kill(owner[0], 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False
    return False
