"""Output paths: the checks every writing command runs first, temporary names, atomic
replacement, and temporary files left behind by killed runs.

Every command that writes calls :func:`check_target` for each file (or
:func:`check_folder_target` for a folder of files) before it reads its input, so a bad
output path costs nothing and leaves nothing. The rules, each a one-line ModelError
naming the option:

- the folder exists and is writable, and the name fits the file system's limit;
- an existing target is a regular file (never a folder, device, FIFO or socket) and is
  not one of the command's input files (``icgen build m.toml -o m.toml`` would destroy
  the model file);
- an existing target is replaced only where the command allows it (``--overwrite``).

Files are written under a temporary name in the target folder (:func:`partial_path`:
``.NAME.partial-<pid>``, shortened when that would exceed the file-name limit) and
renamed onto the target when complete, so a target is never half written.

This module imports nothing heavy: the CLI uses it before numpy is loaded.
"""
import errno
import fcntl
import os
import re
import stat
from collections import namedtuple
from contextlib import contextmanager

from .errors import ModelError

__all__ = ["OutputWriteError", "StaleFile", "check_target", "check_folder_target",
           "partial_path", "replacing", "name_max", "stale_partials", "remove_stale",
           "format_bytes", "describe_os_error"]

#: Marker in temporary names; ``.NAME.partial-<pid>`` (plus the suffix of NAME for files
#: whose writer reads the format from the name, e.g. PNG plots).
PARTIAL_TAG = ".partial-"
_PARTIAL_NAME = re.compile(r"^\..+\.partial-(?P<pid>\d{1,10})(\.[A-Za-z0-9]{1,8})?$")
# POSIX requires at least 14 (_POSIX_NAME_MAX); 255 is what Linux and macOS file systems
# allow (common practice, from memory), the fallback when pathconf cannot tell.
_DEFAULT_NAME_MAX = 255
_FILE_KINDS = ((stat.S_ISDIR, "folder"), (stat.S_ISCHR, "character device"),
               (stat.S_ISBLK, "block device"), (stat.S_ISFIFO, "FIFO (named pipe)"),
               (stat.S_ISSOCK, "socket"))


class OutputWriteError(Exception):
    """Writing an output file failed (a full disk, a file-size limit, an I/O error).

    The message is one line saying what, where, and how much space was needed if known;
    the temporary file has been removed. The CLI exits with status 74 (EX_IOERR of BSD
    sysexits.h): it is neither bad input (2) nor a failed check (1).
    """


def format_bytes(n):
    """'19.2 MB', '1.2 TB': decimal units, as df -H and file managers show them."""
    n = float(n)
    for unit in ("B", "kB", "MB", "GB", "TB", "PB"):
        if abs(n) < 1000 or unit == "PB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000.0
    return f"{n:.1f} PB"


def describe_os_error(exc):
    """'no space left on device (ENOSPC)': the OS's words and the errno name."""
    code = getattr(exc, "errno", None)
    text = os.strerror(code) if code else " ".join(str(exc).split())
    name = errno.errorcode.get(code)
    text = text[:1].lower() + text[1:]
    return f"{text} ({name})" if name else text


def name_max(folder):
    """Longest file name, in bytes, that the file system of ``folder`` accepts."""
    try:
        limit = os.pathconf(folder, "PC_NAME_MAX")
    except (OSError, ValueError):
        return _DEFAULT_NAME_MAX
    return limit if limit and limit > 0 else _DEFAULT_NAME_MAX


def _kind(mode):
    for test, name in _FILE_KINDS:
        if test(mode):
            return name
    return "special file"


def _same_file(a, b):
    try:
        return os.path.samefile(a, b)
    except (OSError, ValueError):
        return False


def check_target(path, key, *, overwrite=True, inputs=()):
    """Absolute path of a file a command may write; ModelError(key, path, rule) otherwise.

    Parameters
    ----------
    path : str or PathLike
    key : str
        The option named in errors, e.g. ``"--output"``.
    overwrite : bool
        Whether an existing regular file may be replaced.
    inputs : sequence of str or None
        Files the command reads; the target must not be one of them (compared by inode,
        so links and other spellings count). None entries are skipped.

    Nothing is created or changed.
    """
    if not isinstance(path, (str, os.PathLike)) or not str(os.fspath(path)).strip():
        raise ModelError(key, path, "must be the path of the file to write")
    path = os.path.abspath(os.fspath(path))
    folder, name = os.path.split(path)
    if os.path.isdir(path):
        raise ModelError(key, path, "is a folder; give the name of a file to write")
    if not os.path.isdir(folder):
        raise ModelError(key, path, f"folder {folder!r} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise ModelError(key, path, f"folder {folder!r} is not writable")
    limit = name_max(folder)
    if len(os.fsencode(name)) > limit:
        raise ModelError(key, path, f"file name is {len(os.fsencode(name))} bytes long; the "
                                    f"file system allows {limit}")
    try:
        st = os.stat(path)
    except FileNotFoundError:        # nothing there, or a dangling link (replaced itself)
        st = None
    except OSError as exc:
        raise ModelError(key, path, f"cannot be examined: {describe_os_error(exc)}") from None
    if st is not None:
        if not stat.S_ISREG(st.st_mode):
            raise ModelError(key, path, f"is a {_kind(st.st_mode)}, not a regular file; "
                                        f"icgen writes and replaces regular files only")
        for source in inputs:
            if source is not None and _same_file(path, source):
                raise ModelError(key, path, f"is the input file {os.fspath(source)!r}; "
                                            f"writing it would destroy the input: choose "
                                            f"another name")
    if not overwrite and os.path.lexists(path):
        raise ModelError(key, path, "file exists; pass --overwrite to replace it")
    return path


def check_folder_target(folder, key, names, *, overwrite=True, inputs=()):
    """Absolute path of a folder a command writes the files ``names`` into (made if it
    does not exist but its parent does); each existing file is checked with
    :func:`check_target`. ModelError(key, ...) otherwise; nothing is created."""
    if not isinstance(folder, (str, os.PathLike)) or not str(os.fspath(folder)).strip():
        raise ModelError(key, folder, "must be the path of a folder")
    folder = os.path.abspath(os.fspath(folder))
    if os.path.lexists(folder) and not os.path.isdir(folder):
        raise ModelError(key, folder, "is a file, not a folder; give a folder for the "
                                      "output files")
    if not os.path.isdir(folder):
        parent = os.path.dirname(folder)
        if not os.path.isdir(parent):
            raise ModelError(key, folder, f"parent folder {parent!r} does not exist")
        if not os.access(parent, os.W_OK | os.X_OK):
            raise ModelError(key, folder, f"parent folder {parent!r} is not writable")
        return folder
    for name in names:
        check_target(os.path.join(folder, name), key, overwrite=overwrite, inputs=inputs)
    return folder


def partial_path(path, keep_suffix=False, pid=None):
    """Temporary name next to ``path``: ``dir/.NAME.partial-<pid>``.

    ``keep_suffix`` appends NAME's suffix (``.NAME.partial-<pid>.png``) for writers
    that choose the format from the name. When the name would exceed the folder's
    file-name limit (:func:`name_max`), NAME is cut and 8 hex digits of its SHA-1 are
    added, so the name always fits and different targets keep different names.
    """
    folder, name = os.path.split(os.path.abspath(path))
    suffix = os.path.splitext(name)[1] if keep_suffix else ""
    if not re.fullmatch(r"\.[A-Za-z0-9]{1,8}", suffix):
        suffix = ""
    tail = f"{PARTIAL_TAG}{os.getpid() if pid is None else pid}{suffix}"
    full = f".{name}{tail}"
    limit = name_max(folder)
    if len(os.fsencode(full)) > limit:
        import hashlib
        digest = hashlib.sha1(os.fsencode(name)).hexdigest()[:8]
        room = limit - len(os.fsencode(f".~{digest}{tail}"))
        while len(os.fsencode(name)) > room:
            name = name[:-1]
        full = f".{name}~{digest}{tail}"
    return os.path.join(folder, full)


@contextmanager
def replacing(path):
    """Yield a temporary path (:func:`partial_path`, suffix kept) to write ``path`` to;
    it is renamed onto ``path`` when the block ends normally and removed otherwise."""
    tmp = partial_path(path, keep_suffix=True)
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        try:
            os.remove(tmp)
        except FileNotFoundError:
            pass


# ------------------------------------------------------------ left-over temporary files


class StaleFile(namedtuple("StaleFile", "path pid size")):
    """A temporary file whose writing process is gone (killed, e.g. by SIGKILL): its
    path, the pid in its name, and its size in bytes."""

    __slots__ = ()

    def describe(self):
        return (f"stale temporary file {self.path} ({format_bytes(self.size)}) of process "
                f"{self.pid}, which is gone")


def _process_alive(pid):
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:          # another user's process
        return True
    except (OverflowError, OSError):
        return False
    return True


def _locked(path):
    """True when a live writer holds the lock on ``path`` (the snapshot writer takes an
    exclusive flock on its temporary file), or when that cannot be told."""
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | os.O_NONBLOCK)
    except OSError:
        return True
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
    except BlockingIOError:
        return True
    except OSError:                  # no lock support here: the process test decides
        return False
    finally:
        os.close(fd)
    return False


def stale_partials(folder):
    """Temporary files in ``folder`` (``.NAME.partial-<pid>``) left by processes that are
    gone: the pid runs no process here and no writer holds the file's lock (a build on
    another host sharing the folder keeps its lock). Sorted by path."""
    out = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return out
    for entry in entries:
        match = _PARTIAL_NAME.match(entry.name)
        if match is None:
            continue
        pid = int(match["pid"])
        try:
            if not entry.is_file(follow_symlinks=False):
                continue
            size = entry.stat(follow_symlinks=False).st_size
        except OSError:
            continue
        if pid == os.getpid() or _process_alive(pid) or _locked(entry.path):
            continue
        out.append(StaleFile(entry.path, pid, size))
    return sorted(out)


def remove_stale(files):
    """Remove the given StaleFile entries; returns those removed."""
    removed = []
    for f in files:
        try:
            os.remove(f.path)
        except FileNotFoundError:
            continue
        removed.append(f)
    return removed
