"""The file object HDF5 writes a snapshot through (h5py's "fileobj" driver)."""
import fcntl
import io
import os

__all__ = ["DiskFile"]


class DiskFile:
    """The temporary file, as the file object of h5py's "fileobj" driver.

    HDF5 cannot recover from a failed write: with its own driver a full disk (ENOSPC) or
    a file-size limit (EFBIG) brought errors from finalizers ("Exception ignored") and a
    crash in the final close. Here the first failed write (or an exception raised by a
    signal handler while HDF5 calls in) is kept in :attr:`error` and every later write
    is dropped: HDF5 always sees success and closes cleanly, and the writer stops at its
    next check with :class:`OutputWriteError`. Reads past the end give zeros, as HDF5's
    own driver does. The file holds an exclusive flock while open, so that
    :func:`icgen.paths.stale_partials` never takes it for a left-over.
    """

    def __init__(self, path):
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_TRUNC | getattr(os, "O_CLOEXEC", 0),
                     0o666)
        self._f = io.FileIO(fd, "r+b", closefd=True)
        self.error = None
        self.written = 0              # file size when the first failure came
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:               # no lock support (some network file systems)
            pass

    @property
    def closed(self):
        return self._f.closed

    def write(self, data):
        view = memoryview(data).cast("B")
        n = len(view)
        if self._f.closed:
            return n
        start = self._f.tell()
        done = 0
        try:
            if self.error is None:
                while done < n:
                    k = self._f.write(view[done:])
                    if not k:
                        raise OSError(5, "write() wrote nothing")   # EIO
                    done += k
        except BaseException as exc:  # an OSError, or a signal's exception: never to HDF5
            self._keep(exc)
        if done < n:
            self._f.seek(start + n)
        return n

    def _keep(self, exc):
        if self.error is None:
            self.error = exc
            try:
                self.written = os.fstat(self._f.fileno()).st_size
            except OSError:
                pass

    def readinto(self, buffer):
        view = memoryview(buffer).cast("B")
        got = 0
        try:
            if not self._f.closed:
                got = self._f.readinto(view) or 0
        except BaseException as exc:  # kept and raised by the writer, never in HDF5
            self._keep(exc)
            got = 0
        if got < len(view):
            view[got:] = bytes(len(view) - got)
        return len(view)

    def read(self, size=-1):
        if size is None or size < 0:
            return b"" if self._f.closed else self._f.read()
        buffer = bytearray(size)
        self.readinto(buffer)
        return bytes(buffer)

    def seek(self, offset, whence=0):
        if self._f.closed:
            return 0
        try:
            return self._f.seek(offset, whence)
        except BaseException as exc:
            self._keep(exc)
            return self._f.seek(offset, whence)   # HDF5 seeks to absolute offsets

    def tell(self):
        if self._f.closed:
            return 0
        try:
            return self._f.tell()
        except BaseException as exc:
            self._keep(exc)
            return self._f.tell()

    def truncate(self, size=None):
        if self._f.closed:
            return 0 if size is None else size
        try:
            if self.error is None:
                return self._f.truncate(size)
        except BaseException as exc:
            self._keep(exc)
        return self._f.tell() if size is None else size

    def flush(self):
        pass

    def sync(self):
        """fsync the data to disk (a failure is kept in :attr:`error` like a write's)."""
        if self.error is None and not self._f.closed:
            try:
                os.fsync(self._f.fileno())
            except OSError as exc:
                self._keep(exc)

    def close(self):
        self._f.close()

