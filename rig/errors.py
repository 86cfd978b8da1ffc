"""The rig's exceptions, and the one place that turns a failure into a line on stderr and an exit code.

    UsageError, ConfigError (bad input)                 exit 2, the message names the file, key or option
    DeviceFault, OSError (a device or the storage)      exit 3
    KeyboardInterrupt (Ctrl-C, SIGTERM, SIGHUP)         exit 130
    anything else (a bug)                               exit 1: one line, the traceback in a log file
                                                        (error.log in the run folder, else a temporary file),
                                                        the run marked "failed"; --debug shows the traceback
"""

from __future__ import annotations

import errno
import os
import sys
import tempfile
import traceback
from pathlib import Path

EXIT_BUG, EXIT_USAGE, EXIT_FAULT, EXIT_INTERRUPTED = 1, 2, 3, 130
# errno values that mean the storage, not the path given, is at fault
STORAGE_FULL = frozenset({errno.ENOSPC, errno.EDQUOT})


class FringecalError(Exception):
    """Base of every error fringecal raises on purpose."""


class UsageError(FringecalError):
    """An argument, file or setting given by the user cannot be used; the message names it and what was expected."""


class DeviceFault(FringecalError):
    """A device failed for good (gone, or failing every retry); the message names the device and what failed."""


class _Crash:
    """The run folder being written, if any: where a crash's log goes and whose status it marks "failed"."""

    folder = None


def writing_to(folder) -> None:
    """Record ``folder`` (with ``path``, ``mark_failed(message)`` and ``release()``) as the run this command writes."""
    _Crash.folder = folder


def done_writing() -> None:
    """The command is over: release the run folder it wrote (its lock), if any."""
    folder, _Crash.folder = _Crash.folder, None
    if folder is not None:
        folder.release()


def describe_os_error(err: OSError) -> str:
    """An OSError as 'PATH: what happened' (the path when the error carries one)."""
    what = err.strerror or str(err)
    return f"{err.filename}: {what}" if err.filename else what


def run_command(func, args, debug: bool = False) -> int:
    """Call ``func(args)`` and map whatever it raises to a one-line message on stderr and an exit code."""
    from analysis.config import ConfigError  # analysis/ never imports rig/, so the import goes this way

    try:
        return func(args)
    except (ConfigError, UsageError) as err:
        return _fail(f"error: {err}", EXIT_USAGE, debug)
    except DeviceFault as err:
        return _fail(f"error: {err}", EXIT_FAULT, debug)
    except OSError as err:
        return _fail(f"storage: {describe_os_error(err)}", EXIT_FAULT, debug)
    except KeyboardInterrupt:
        return _fail("interrupted", EXIT_INTERRUPTED, debug, status="interrupted")
    except Exception as err:  # a bug: one line here, the details in a log
        return _crashed(err, debug)
    finally:
        done_writing()


def _fail(message: str, code: int, debug: bool, status: str = "failed") -> int:
    if debug:
        traceback.print_exc()
    _end_run(message, status)
    print(f"fringecal: {message}", file=sys.stderr)
    return code


def _end_run(message: str, status: str) -> None:
    """A run folder this command made or resumed never stays "running" after the command ends."""
    folder = _Crash.folder
    if folder is not None and folder.info.get("status") == "running":
        try:
            folder.mark_failed(message, status)
        except Exception:  # the message still goes out (a full disk may refuse run.json)
            pass


def _crashed(err: Exception, debug: bool) -> int:
    text = traceback.format_exc()
    summary = f"{type(err).__name__}: {err}".splitlines()[0][:300]
    log = _write_log(text)
    _end_run(f"internal error: {summary}", "failed")
    if debug:
        print(text, file=sys.stderr, end="")
    where = f"; details in {log}" if log else ""
    print(f"fringecal: internal error (a bug, please report it): {summary}{where}", file=sys.stderr)
    return EXIT_BUG


def _write_log(text: str) -> Path | None:
    """The traceback in error.log of the run folder (appended), else in a temporary file; None if neither works."""
    folder = _Crash.folder
    try:
        if folder is not None:
            path = Path(folder.path) / "error.log"
            with open(path, "a", encoding="utf-8") as fh:
                fh.write(text)
            return path
        fd, name = tempfile.mkstemp(prefix="fringecal-error-", suffix=".log")
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        return Path(name)
    except OSError:
        return None
