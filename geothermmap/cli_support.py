"""Error handling shared by every CLI command (kept apart from cli.py so that command
modules can import it without importing the whole CLI)."""

from __future__ import annotations

import functools
import sys
from collections.abc import Callable
from typing import Any

import click

from geothermmap.errors import UserError

EXIT_USER_ERROR = 1
EXIT_INTERNAL_ERROR = 2
EXIT_INTERRUPTED = 130


def _err(msg: str) -> None:
    click.echo(msg, err=True)


def handle_errors(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Turn user errors into a message and exit code 1 (traceback only with --debug)."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        debug = bool(click.get_current_context().find_root().params.get("debug"))
        try:
            return fn(*args, **kwargs)
        except UserError as err:
            if debug:
                raise
            _err(f"error: {err}")
            sys.exit(EXIT_USER_ERROR)
        except KeyboardInterrupt:
            _err("interrupted: stopped cleanly, no partial or temporary file left behind. "
                 "Maps already complete are kept: `run --resume` reuses them and computes "
                 "the rest.")
            sys.exit(EXIT_INTERRUPTED)
        except click.exceptions.Exit:
            raise
        except Exception as err:  # noqa: BLE001 - last line of defence for users
            if debug:
                raise
            if isinstance(err, BrokenPipeError) and _stdout_closed():
                _silence_stdout()  # e.g. `geothermmap probe ... | head -1`: the reader left
                sys.exit(EXIT_USER_ERROR)
            path = _users_path(err)
            if path is not None:
                # a file the user named could not be read or written (permissions, a
                # folder in place of a file, a full disk...): theirs to fix, not a bug
                _err(f"error: {path}: {err.strerror or err}")
                sys.exit(EXIT_USER_ERROR)
            _err(f"internal error: {type(err).__name__}: {err}\n"
                 "This is a bug in geothermmap or a library; rerun with --debug for details.")
            sys.exit(EXIT_INTERNAL_ERROR)

    return wrapper


def _stdout_closed() -> bool:
    """Whether stdout is a pipe whose reader has gone (poll reports an error on the
    write end of such a pipe)."""
    import select

    try:
        poller = select.poll()
        poller.register(sys.stdout.fileno(), select.POLLOUT)
        return any(ev & (select.POLLERR | select.POLLHUP) for _, ev in poller.poll(0))
    except (OSError, ValueError, AttributeError):  # no fileno (e.g. captured), or no poll
        return False


def _users_path(err: Exception) -> str | None:
    """The path of an OSError about a file the user chose (the destination of a failed
    rename rather than its temporary name); None for other errors, and for the tool's
    own work files (a failure there is a bug)."""
    if not isinstance(err, OSError) or isinstance(err, BrokenPipeError):
        return None
    from geothermmap.pipeline import WORK_DIR_NAME  # only on this error path: heavy import

    path = err.filename2 or err.filename
    if path is None or WORK_DIR_NAME in str(path):
        return None
    return str(path)


def _silence_stdout() -> None:
    """Point stdout at /dev/null so that Python's flush at exit does not fail again
    (the recipe of the Python documentation for SIGPIPE)."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def entry() -> None:
    """The ``geothermmap`` console script: Ctrl-C while the libraries load (about a
    second) ends with the same message and exit code as later, not a traceback."""
    try:
        from geothermmap.cli import main
    except KeyboardInterrupt:
        _err("interrupted before the run started; nothing was written.")
        sys.exit(EXIT_INTERRUPTED)
    main()
