"""Writing whole files safely, shared by every layer (like :mod:`marchkit.errors`)."""

from __future__ import annotations

from pathlib import Path

from .errors import OutputError


def write_file(path, data: bytes | str, force: bool = False) -> None:
    """Write a whole file under a temporary name in its directory, then ``os.replace`` it
    into place, so a reader never sees half a file.  An existing file is an error unless
    ``force``."""
    import os
    import tempfile

    p = Path(path)
    if p.exists() and not force:
        raise OutputError(f"{p} exists; use --force to replace it")
    if p.is_dir():
        raise OutputError(f"{p} is a directory")
    d = p.parent if str(p.parent) else Path(".")
    if not d.is_dir():
        raise OutputError(f"cannot write {p}: no directory {d}")
    if isinstance(data, str):
        data = data.encode("utf-8")
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".part", dir=d)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)     # mkstemp makes 0600; a plain file follows the umask
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
