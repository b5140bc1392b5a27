"""Running a command so that nothing ends in a Python traceback.

* every :class:`~marchkit.errors.MarchkitError` prints its own message (exit status from
  the error: 2 for input errors);
* an operating-system error anywhere (a full disk, a read-only directory, no permission)
  prints one line and exits 2;
* a reader that stops early (``marchkit ... | head``) ends the command quietly, status 0;
* Ctrl-C (or SIGTERM) prints ``interrupted`` and exits 130;
* a terminal that cannot show a character (``PYTHONIOENCODING=ascii``) gets ``?`` instead;
* anything else is a bug in marchkit: one line saying so, exit 70 (``MARCHKIT_DEBUG=1``
  shows the traceback).
"""

from __future__ import annotations

import errno
import os
import sys

EXIT_INPUT = 2
EXIT_INTERRUPTED = 130
EXIT_BUG = 70


def tolerant_streams() -> None:
    """Standard output and error replace what their encoding cannot show instead of failing."""
    for name in ("stdout", "stderr"):
        s = getattr(sys, name, None)
        enc = getattr(s, "encoding", None) or "utf-8"
        try:
            "×⇑⇓⇕τµ—".encode(enc)
        except (UnicodeEncodeError, LookupError):
            try:
                s.reconfigure(errors="replace")
            except (AttributeError, ValueError, OSError):
                pass


def _silence_stdout() -> None:
    """After a closed pipe or a full disk, point standard output at /dev/null so that the
    interpreter's final flush does not fail again."""
    try:
        fd = os.open(os.devnull, os.O_WRONLY)
        os.dup2(fd, sys.stdout.fileno())
        os.close(fd)
    except (OSError, ValueError, AttributeError):
        pass


def _say(text: str) -> None:
    try:
        sys.stderr.write(text + "\n")
        sys.stderr.flush()
    except (OSError, ValueError):
        pass


def run_guarded(body) -> int:
    """Call ``body()`` (which returns an exit status) under the rules above."""
    try:
        tolerant_streams()
        code = int(body() or 0)
    except BaseException as e:  # noqa: BLE001
        return _fail(e)
    try:
        sys.stdout.flush()
    except BrokenPipeError:
        _silence_stdout()
        return code
    except OSError as e:
        _silence_stdout()
        _say(f"error: cannot write standard output: {e.strerror or e}")
        return EXIT_INPUT
    return code


def _fail(exc: BaseException) -> int:
    from ..errors import MarchkitError

    try:
        raise exc
    except MarchkitError as e:
        _say(e.render())
        return e.exit_code
    except KeyboardInterrupt:
        _say("interrupted")
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        _silence_stdout()
        return 0
    except OSError as e:
        if getattr(e, "filename", None) is None and (e.errno in (errno.ENOSPC, errno.EIO) or _is_stdout_error()):
            _silence_stdout()
            _say(f"error: cannot write standard output: {e.strerror or e}")
        else:
            where = f": {e.filename}" if getattr(e, "filename", None) else ""
            _say(f"error: {e.strerror or e}{where}")
        return EXIT_INPUT
    except MemoryError:
        _say("error: out of memory; choose a smaller memory, pair scope or fault selection")
        return EXIT_INPUT
    except RecursionError:
        _say("error: the input is nested too deeply")
        return EXIT_INPUT
    except SystemExit:
        raise
    except Exception as e:  # noqa: BLE001 - the last net: a bug, said plainly
        if os.environ.get("MARCHKIT_DEBUG"):
            raise
        _say(f"internal error (a bug in marchkit, please report it): {type(e).__name__}: {str(e)[:200]}"
             "; run with MARCHKIT_DEBUG=1 for details")
        return EXIT_BUG


def _is_stdout_error() -> bool:
    try:
        sys.stdout.flush()
    except (OSError, ValueError):
        return True
    return False
