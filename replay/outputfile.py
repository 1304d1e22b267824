"""Output files written only inside their folder: never through a link, whole or not at all.

Every output (apply's CSV, export's C files) is written to a temporary file that is
created exclusively (O_CREAT | O_EXCL | O_NOFOLLOW) beside the final name, then
renamed over it with os.replace, which is atomic on POSIX and on Windows. So:
- a name planted at the temporary file's place (a symlink pointing elsewhere) makes the
  exclusive create fail and a fresh name is tried; nothing is written through it;
- a symlink at the final name is replaced itself, never its target: the rename swaps the
  directory entry (with `replace=False` the name is refused like any existing file);
- a reader never sees half a file, and an error or Ctrl-C leaves the previous output
  as it was (the temporary file is removed);
- every operation is relative to the folder opened once (dir_fd where the platform has
  it), so swapping the folder's path for a link meanwhile cannot move the writes.

Without `replace`, the final name is reserved at the start by an exclusive create (an
empty file), so a long `apply` is refused before it runs, not after, and the rename at the
end only ever replaces that reservation.

What is at the final name decides the rest (`write_whole`):
- nothing, a regular file, a dangling link or a link to a regular file: the temporary
  file is renamed over the name, as above;
- a stream (a character device such as /dev/null or a terminal, a named pipe): written
  into, as the user asked (a stream cannot be replaced whole, and renaming over a device
  node would destroy it); through a link only when the link is the system's own, under
  /dev or /proc (/dev/stdout), since a link planted elsewhere could aim at any device;
- a folder, a block device, a socket or a planted link to a stream: refused (OSError),
  nothing is written.

Hand-written: tempfile.mkstemp creates files of mode 0600 (outputs should follow the
umask like any file the user writes) and has no dir_fd.
"""

from __future__ import annotations

import errno
import os
import secrets
import stat
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO

_FLAGS = (os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
          | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0))
_TRIES = 20


class OutputFolder:
    """A folder opened once; files in it are created exclusively and replaced atomically.

    path:   the folder (a link to a folder is the user's choice and is followed once,
            when it is opened); `create` makes it (and its parents) if missing.
    Names given to the methods are plain file names inside the folder (no separator).
    """

    def __init__(self, path: str | os.PathLike[str], create: bool = False) -> None:
        self.path = Path(path)
        if create:
            self.path.mkdir(parents=True, exist_ok=True)
        self._fd: int | None = None
        # os.replace shares os.rename's dir_fd support (the set lists rename only)
        if os.open in os.supports_dir_fd and os.rename in os.supports_dir_fd:
            self._fd = os.open(self.path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
        self._reserved: dict[str, tuple[int, int]] = {}

    # -- names in the folder ----------------------------------------------------

    def _where(self, name: str) -> tuple[str, dict]:
        if not name or name in (".", "..") or os.sep in name or (os.altsep and os.altsep in name):
            raise ValueError(f"{name!r} is not a plain file name")
        if self._fd is None:
            return str(self.path / name), {}
        return name, {"dir_fd": self._fd}

    def lexists(self, name: str) -> bool:
        """True when anything (a file, a folder, a link, even a dangling one) has `name`."""
        where, fd = self._where(name)
        try:
            os.stat(where, follow_symlinks=False, **fd)
        except FileNotFoundError:
            return False
        return True

    def is_link(self, name: str) -> bool:
        """True when `name` is a symbolic link (dangling or not)."""
        where, fd = self._where(name)
        try:
            return stat.S_ISLNK(os.stat(where, follow_symlinks=False, **fd).st_mode)
        except FileNotFoundError:
            return False

    def _create(self, name: str) -> int:
        where, fd = self._where(name)
        return os.open(where, _FLAGS, 0o666, **fd)

    def reserve(self, name: str) -> None:
        """Claim `name` now with an exclusive create (FileExistsError if anything has it,
        a link included); `commit(..., replace=False)` later replaces only this claim."""
        handle = self._create(name)
        try:
            info = os.fstat(handle)
        finally:
            os.close(handle)
        self._reserved[name] = (info.st_dev, info.st_ino)

    def open_temp(self, name: str) -> tuple[str, IO[bytes]]:
        """(temporary name, binary file open for writing) beside `name`, created
        exclusively under a fresh random name (hidden, ending in .tmp)."""
        for _ in range(_TRIES):
            temp = f".{name}.{secrets.token_hex(4)}.tmp"
            try:
                handle = self._create(temp)
            except FileExistsError:
                continue                    # taken (or planted): another random name
            return temp, os.fdopen(handle, "wb")
        raise FileExistsError(errno.EEXIST, "no free temporary name", str(self.path / name))

    def kind(self, name: str) -> str:
        """What has `name`: "none", "file" (a regular file, or a symbolic link to one or
        dangling: renaming replaces the entry itself), "stream" (a character device or a
        named pipe, directly or through a link) or "other" (folder, block device, socket)."""
        where, fd = self._where(name)
        try:
            mode = os.stat(where, follow_symlinks=False, **fd).st_mode
        except FileNotFoundError:
            return "none"
        linked = stat.S_ISLNK(mode)
        if linked:
            try:
                mode = os.stat(where, **fd).st_mode
            except OSError:
                return "file"               # dangling (or a loop): the link is replaced
        if stat.S_ISREG(mode):
            return "file"
        if stat.S_ISCHR(mode) or stat.S_ISFIFO(mode):
            system = os.path.realpath(self.path).startswith(("/dev/", "/proc/")) or \
                os.path.realpath(self.path) in ("/dev", "/proc")
            return "stream" if not linked or system else "other"
        return "other"

    def commit(self, temp: str, name: str, replace: bool) -> None:
        """Rename `temp` over `name` in one step. replace=False: `name` must be this
        folder's own reservation (still the same file), else FileExistsError. Never over
        anything but a regular file or a link (OSError): a device node or a folder stays."""
        if not replace:
            self._check_reservation(name)
        elif self.kind(name) not in ("none", "file"):
            raise _not_a_file(self.path / name)
        src, fd = self._where(temp)
        dst, _ = self._where(name)
        if fd:
            os.replace(src, dst, src_dir_fd=self._fd, dst_dir_fd=self._fd)
        else:
            os.replace(src, dst)
        self._reserved.pop(name, None)

    def _check_reservation(self, name: str) -> None:
        where, fd = self._where(name)
        try:
            info = os.stat(where, follow_symlinks=False, **fd)
        except FileNotFoundError:
            info = None
        if info is None or self._reserved.get(name) != (info.st_dev, info.st_ino):
            raise FileExistsError(errno.EEXIST, "appeared while writing", str(self.path / name))

    def discard(self, name: str) -> None:
        """Remove a temporary file or this folder's own reservation of `name`, if present
        (an entry that is not ours is left alone)."""
        if name in self._reserved:
            try:
                self._check_reservation(name)
            except FileExistsError:
                self._reserved.pop(name, None)
                return
            self._reserved.pop(name, None)
        where, fd = self._where(name)
        try:
            os.unlink(where, **fd)
        except FileNotFoundError:
            pass

    def close(self) -> None:
        """Release the folder (reservations not committed are removed)."""
        for name in list(self._reserved):
            self.discard(name)
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def __enter__(self) -> OutputFolder:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class NotAFileError(OSError):
    """What has the output's name can be neither replaced nor written into; str() is
    one sentence naming what to fix."""

    def __str__(self) -> str:
        return f"{self.filename} {self.strerror}; remove it or choose another name."


def _not_a_file(path: Path) -> OSError:
    if path.is_dir():
        return IsADirectoryError(errno.EISDIR, "Is a directory", str(path))
    if path.is_symlink():
        return NotAFileError(errno.EINVAL, "is a symbolic link to a device or a pipe, "
                             "which is never followed outside /dev", str(path))
    return NotAFileError(errno.EINVAL, "is not a regular file, a terminal or a pipe",
                         str(path))


@contextmanager
def write_whole(path: str | os.PathLike[str], replace: bool) -> Iterator[IO[bytes]]:
    """A binary file to write `path` through: created exclusively beside it, renamed over
    it when the block ends without an error, removed otherwise (the old `path`, if any,
    stays). replace=False refuses an existing `path` (FileExistsError) before the block.
    A stream at `path` (/dev/null, a terminal, a named pipe) is written into directly."""
    target = Path(path)
    with OutputFolder(target.parent if str(target.parent) else ".") as folder:
        kind = folder.kind(target.name)
        if kind != "none" and not replace:
            raise FileExistsError(errno.EEXIST, "File exists", str(target))
        if kind == "other":
            raise _not_a_file(target)
        if kind == "stream":
            with open(target, "wb") as stream:
                yield stream
            return
        if not replace:
            folder.reserve(target.name)
        temp, handle = folder.open_temp(target.name)
        try:
            with handle:
                yield handle
            folder.commit(temp, target.name, replace)
        except BaseException:
            folder.discard(temp)
            raise
