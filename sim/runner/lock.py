"""One writer per run folder.

Every command that writes into a run folder (a run, its resumption, a report written into it) holds an exclusive
lock on the folder's ``.lock`` file for as long as it writes (``flock``; the kernel releases it when the process
ends, however it ends, so a killed run never leaves the folder locked). A second writer is refused at once with
one line; readers that must not see a half-written folder (``verify``) take the lock shared. The lock file holds
the process id of the writer, for the message, and is not part of the folder's record (the manifest).
"""

from __future__ import annotations

import fcntl
import os
from pathlib import Path

from sim.core.errors import InputError

__all__ = ["LOCK_FILE", "FolderLock"]

LOCK_FILE = ".lock"


class FolderLock:
    """A lock on a run folder, held within a ``with`` block.

    Parameters
    ----------
    folder : path-like
        The run folder (it must exist).
    key : str
        Key path named in the error (``folder``, ``resume``, ``out``).
    shared : bool
        A reader's lock (several may hold it; no writer meanwhile).
    """

    def __init__(self, folder, key: str = "folder", shared: bool = False):
        self.folder = Path(folder)
        self.key = key
        self.shared = shared
        self.fd: int | None = None

    def acquire(self) -> FolderLock:
        """Take the lock now or refuse.

        Returns
        -------
        FolderLock

        Raises
        ------
        InputError
            Naming ``key`` when another process holds the lock.
        """
        path = self.folder / LOCK_FILE
        if path.is_symlink():
            raise InputError(self.key, f"{path} is a symbolic link; a run folder holds none (remove it)")
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW, 0o644)
        try:
            fcntl.flock(fd, (fcntl.LOCK_SH if self.shared else fcntl.LOCK_EX) | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(fd, 64, 0).decode("ascii", "replace").strip() or "another process"
            os.close(fd)
            raise InputError(self.key, f"{self.folder} is being written by process {holder}; wait for it to "
                                       "finish or stop it") from None
        if not self.shared:
            os.ftruncate(fd, 0)
            os.pwrite(fd, str(os.getpid()).encode("ascii"), 0)
        self.fd = fd
        return self

    def release(self) -> None:
        """Let go of the lock (the kernel does it too when the process ends)."""
        if self.fd is not None:
            fcntl.flock(self.fd, fcntl.LOCK_UN)
            os.close(self.fd)
            self.fd = None

    def __enter__(self) -> FolderLock:
        return self.acquire()

    def __exit__(self, *exc) -> bool:
        self.release()
        return False
