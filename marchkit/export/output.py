"""Streaming output that appears under its name only when complete.

Each target is written to a temporary file in the target's own directory
(``.NAME.XXXXXX.part``) and renamed into place when everything has been written, so an
export that is stopped or killed leaves nothing under the target name (a process killed with
SIGKILL can leave its hidden ``.part`` file behind; a handled stop removes it).  Existing
files are not replaced unless ``force`` is given; without it the final step links the file
into place, which fails if another process created the name in the meantime.

``-`` means standard output, written as it comes; so is an existing target that is not a
regular file (``/dev/null``, a named pipe).
"""

from __future__ import annotations

import io
import os
import sys
from pathlib import Path

from ..errors import OutputError

BUFFER = 1 << 20


def _umask() -> int:
    m = os.umask(0)
    os.umask(m)
    return m


class Targets:
    """A set of output files written together: all are checked first, then each is
    written to a temporary file, and all are renamed into place at the end (``commit``)."""

    def __init__(self, paths, force: bool = False):
        self.force = force
        paths = [os.fspath(p) for p in paths]
        self.paths = [p if p == "-" else Path(p) for p in paths]
        self._open: list[tuple[Path, str, io.BufferedWriter]] = []
        self._streams: list = []
        self._done = False
        self.direct: set[Path] = set()
        from ..files import STREAM, STDOUT, target_kind

        for i, (raw, p) in enumerate(zip(paths, list(self.paths))):
            kind = target_kind(raw, force)
            if kind == STDOUT:
                self.paths[i] = "-"
            elif kind == STREAM:
                self.direct.add(p)     # a device or a pipe (/dev/null, a FIFO): written through

    def open(self, path):
        """A binary file object for one of the targets."""
        if path == "-" or str(path) == "-":
            return _Stdout()
        p = Path(path)
        if p in self.direct:
            try:
                f = open(p, "wb", buffering=BUFFER)
            except OSError as e:
                raise OutputError(f"cannot write {p}: {e.strerror}") from None
            self._streams.append(f)
            return f
        from ..files import make_temp

        fd, tmp = make_temp(p)
        f = os.fdopen(fd, "wb", buffering=BUFFER)
        self._open.append((p, tmp, f))
        return f

    def commit(self) -> None:
        """Rename every temporary file into place, in the order they were opened reversed
        (the main file, opened first, appears last)."""
        from ..files import os_error_text

        for f in self._streams:
            try:
                f.close()
            except OSError as e:
                raise OutputError(f"cannot write {getattr(f, 'name', 'the output')}: {os_error_text(e)}") from None
        self._streams.clear()
        for p, _, f in self._open:
            try:
                f.close()
            except OSError as e:
                raise OutputError(f"cannot write {p}: {os_error_text(e)}") from None
        for p, tmp, _ in reversed(self._open):
            try:
                self._place(p, tmp)
            except OSError as e:
                raise OutputError(f"cannot write {p}: {os_error_text(e)}") from None
        self._open.clear()
        self._done = True

    def _place(self, p: Path, tmp: str) -> None:
        if self.force:
            if p.exists() and not p.is_file():
                raise OutputError(f"{p} appeared while exporting and is not a regular file; not replaced")
            os.replace(tmp, p)
            return
        try:
            os.link(tmp, p)
        except FileExistsError:
            raise OutputError(f"{p} appeared while exporting; use --force to replace it") from None
        except OSError:
            # a file system without hard links: rename (no check for a late newcomer)
            if p.exists() or p.is_symlink():
                raise OutputError(f"{p} appeared while exporting; use --force to replace it") from None
            os.replace(tmp, p)
            return
        os.unlink(tmp)

    def abort(self) -> None:
        for f in self._streams:
            try:
                f.close()
            except OSError:
                pass
        self._streams.clear()
        for _, tmp, f in self._open:
            try:
                f.close()
            except OSError:
                pass
            try:
                os.unlink(tmp)
            except OSError:
                pass
        self._open.clear()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None and not self._done:
            try:
                self.commit()
            except BaseException:
                self.abort()
                raise
        elif exc_type is not None:
            self.abort()
        return False


class _Stdout:
    """Standard output as a binary file (not closed at the end)."""

    def __init__(self):
        self._f = sys.stdout.buffer

    def write(self, b) -> int:
        return self._f.write(b)

    def flush(self) -> None:
        self._f.flush()

    def close(self) -> None:
        self._f.flush()
