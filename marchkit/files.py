"""Writing files safely, shared by every layer (like :mod:`marchkit.errors`).

Rules every writer follows (export, reports, plots, CSV):

* ``-`` is standard output.
* A target that exists and is not a regular file (``/dev/null``, a named pipe, a terminal)
  is written *through*, never replaced, with or without ``--force``.
* A regular file is written under a temporary name in its own directory
  (``.NAME.PID.XXXXXX.part``) and renamed into place when complete, so nothing ever appears
  under the target name half-written.  An existing regular file is replaced only with
  ``force``.
* Temporary files left by a process that no longer runs (killed with SIGKILL) are removed
  the next time something is written to the same target.
* Every operating-system error (full disk, read-only directory, no permission) becomes an
  :class:`~marchkit.errors.OutputError` naming the target.
"""

from __future__ import annotations

import os
from pathlib import Path

from .errors import OutputError

STDOUT = "stdout"
STREAM = "stream"      # an existing device, pipe or socket: written through
FILE = "file"          # a regular file (new or replaced): temporary file + rename


def os_error_text(e: OSError) -> str:
    return e.strerror or str(e) or type(e).__name__


def target_kind(path, force: bool = False) -> str:
    """Check a target before any work and say how it will be written.

    Raises :class:`OutputError` for an empty name, a directory, a missing directory, a
    name ending in ``/`` and an existing regular file without ``force``.
    """
    s = os.fspath(path) if not isinstance(path, str) else path
    if s == "-":
        return STDOUT
    if s == "":
        raise OutputError("the output file name is empty")
    if s.endswith(("/", os.sep)):
        if os.path.isdir(s):
            raise OutputError(f"{s} is a directory; give a file name inside it")
        raise OutputError(f"cannot write {s}: no directory {s.rstrip('/' + os.sep) or s}"
                          " (a name ending in / is a directory)")
    p = Path(s)
    try:
        if p.is_dir():
            raise OutputError(f"{p} is a directory")
        if p.exists() and not p.is_file():
            return STREAM
        if p.is_symlink() and not p.exists():
            raise OutputError(f"{p} is a symbolic link to a missing file ({os.readlink(p)}); "
                              "remove it or write elsewhere")
        if p.exists() and not force:
            raise OutputError(f"{p} exists; use --force to replace it")
    except OSError as e:
        raise OutputError(f"cannot write {p}: {os_error_text(e)}") from None
    d = p.parent if str(p.parent) else Path(".")
    if not d.is_dir():
        raise OutputError(f"cannot write {p}: no directory {d}")
    if not os.access(d, os.W_OK | os.X_OK):
        raise OutputError(f"cannot write {p}: directory {d} is not writable")
    return FILE


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def stale_parts(path) -> list[Path]:
    """Temporary files (``.NAME.PID.XXXXXX.part``) of ``path`` whose writer no longer runs."""
    p = Path(path)
    d = p.parent if str(p.parent) else Path(".")
    head = f".{p.name}."
    out = []
    try:
        names = os.listdir(d)
    except OSError:
        return out
    for n in names:
        if not (n.startswith(head) and n.endswith(".part")):
            continue
        middle = n[len(head):-len(".part")]
        pid_text = middle.split(".", 1)[0]
        if not pid_text.isdigit() or "." not in middle:
            continue
        if int(pid_text) != os.getpid() and not _pid_alive(int(pid_text)):
            out.append(d / n)
    return out


def sweep_stale(path) -> int:
    """Remove the stale temporary files of ``path``; the number removed."""
    n = 0
    for q in stale_parts(path):
        try:
            q.unlink()
            n += 1
        except OSError:
            pass
    return n


def make_temp(path) -> tuple[int, str]:
    """A new temporary file beside ``path`` (mode from the umask): ``(fd, name)``."""
    import tempfile

    p = Path(path)
    d = p.parent if str(p.parent) else Path(".")
    sweep_stale(p)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.{os.getpid()}.", suffix=".part", dir=d)
    except OSError as e:
        raise OutputError(f"cannot write {p}: {os_error_text(e)}") from None
    mask = os.umask(0)
    os.umask(mask)
    try:
        os.chmod(tmp, 0o666 & ~mask)     # mkstemp makes 0600; a plain file follows the umask
    except OSError:
        pass
    return fd, tmp


def write_file(path, data: bytes | str, force: bool = False) -> None:
    """Write a whole file safely (see the module's rules); ``-`` writes to standard output."""
    import sys

    if isinstance(data, str):
        data = data.encode("utf-8")
    kind = target_kind(path, force)
    p = Path(path)
    if kind == STDOUT:
        try:
            sys.stdout.flush()
            sys.stdout.buffer.write(data)
            sys.stdout.buffer.flush()
        except BrokenPipeError:
            raise
        except OSError as e:
            raise OutputError(f"cannot write standard output: {os_error_text(e)}") from None
        return
    if kind == STREAM:
        try:
            with open(p, "wb") as f:
                f.write(data)
        except OSError as e:
            raise OutputError(f"cannot write {p}: {os_error_text(e)}") from None
        return
    fd, tmp = make_temp(p)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
        if not force and p.exists():
            raise OutputError(f"{p} appeared while writing; use --force to replace it")
        os.replace(tmp, p)
    except OSError as e:
        _unlink(tmp)
        raise OutputError(f"cannot write {p}: {os_error_text(e)}") from None
    except BaseException:
        _unlink(tmp)
        raise


def _unlink(name) -> None:
    try:
        os.unlink(name)
    except OSError:
        pass


def write_with(path, produce, force: bool = False, binary: bool = True) -> None:
    """Write ``path`` by calling ``produce(file_object)`` (for writers that need a file,
    such as matplotlib's ``savefig``), with the same rules as :func:`write_file`."""
    import io

    buf = io.BytesIO() if binary else io.StringIO()
    produce(buf)
    write_file(path, buf.getvalue(), force=force)
