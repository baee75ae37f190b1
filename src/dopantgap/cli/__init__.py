"""Command line: argument parsing only; the work is done by the library.

Each command module (``learning``, ``using``, ``screening``, ``rounds``, ``demo``) holds, per command, a
function declaring its options and a handler ``run(arguments, say)``, listed in its
``COMMANDS``; this module orders them, dispatches, and turns errors into one-line messages.
"""

import argparse
import os
import signal
import sys
import threading

from dopantgap import __version__
from dopantgap.cli import demo, learning, rounds, screening, using
from dopantgap.cli.common import _MANIFEST_NAME as _MANIFEST_NAME  # re-exported: a test keeps it equal to store's
from dopantgap.cli.common import _refuse_outputs_in_model_folders
from dopantgap.errors import DopantgapError

__all__ = ["main"]

# the order `dopantgap --help` lists the commands in; a module's command missing here goes last
_HELP_ORDER = ("check", "fit", "validate", "fill", "next", "screen", "explain", "add", "history", "replay", "report", "demo")
_GROUPS = {name: command for module in (learning, using, screening, rounds, demo) for name, command in module.COMMANDS.items()}
_ORDERED = [name for name in _HELP_ORDER if name in _GROUPS] + [name for name in _GROUPS if name not in _HELP_ORDER]
_COMMANDS = {name: _GROUPS[name].run for name in _ORDERED}


def _build_parser():
    parser = argparse.ArgumentParser(
        prog="dopantgap",
        description=(
            "Learn a table of DFT impurity energies and estimate its missing cells "
            "with calibrated uncertainty."
        ),
    )
    parser.add_argument("--version", action="version", version=f"dopantgap {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    commands.required = True
    for name in _ORDERED:
        _GROUPS[name].add_parser(commands)
    return parser


class _Terminated(BaseException):
    """SIGTERM as an exception: files being written are cleaned up and workers stopped."""


def _raise_terminated(signum, frame):
    raise _Terminated()


def _stop_behind(error):
    """The Ctrl-C or SIGTERM in ``error``'s chain of causes, or None.

    A stop that lands while joblib is still starting its workers makes joblib's own
    clean-up fail (loky: "cannot join thread before it is started"); that error, not
    the stop, reaches the command line, with the stop as its context.
    """
    seen = set()
    link = error
    while link is not None and id(link) not in seen:
        if isinstance(link, (KeyboardInterrupt, _Terminated)):
            return link
        seen.add(id(link))
        link = link.__cause__ or link.__context__
    return None


def main(argv=None):
    """Run the command line; returns the exit status (0 success, 2 user error)."""
    parser = _build_parser()
    arguments = parser.parse_args(argv)
    quiet = getattr(arguments, "quiet", False)
    # figures are written to files, never shown: the command line (not the library,
    # whose users may have chosen a backend of their own) selects the file backend,
    # without importing matplotlib for commands that draw nothing
    if "matplotlib" in sys.modules:
        sys.modules["matplotlib"].use("Agg")
    else:
        os.environ["MPLBACKEND"] = "Agg"

    def say(line=""):
        if not quiet:
            print(line, flush=True)

    # SIGTERM (a job scheduler's stop, kill PID) ends the run as Ctrl-C does: the file or
    # folder being written is left out, and the worker processes are stopped
    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        _refuse_outputs_in_model_folders(arguments)
        _COMMANDS[arguments.command](arguments, say)
    except DopantgapError as error:
        print(f"dopantgap {arguments.command}: {error}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # output piped into `head` or a pager that closed early: nothing more to say; point
        # stdout at devnull so the interpreter's final flush does not complain either
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except OSError as error:
        # a folder where a file should go, a full disk, no permission: the user's to fix
        target = error.filename or ""
        print(f"dopantgap {arguments.command}: {target}: {error.strerror or error}", file=sys.stderr)
        return 2
    except (KeyboardInterrupt, _Terminated, Exception) as error:
        stop = _stop_behind(error)
        if stop is None:
            raise
        if isinstance(stop, KeyboardInterrupt):
            print("dopantgap: interrupted; no file was left half-written.", file=sys.stderr)
            return 130
        print("dopantgap: terminated; no file was left half-written.", file=sys.stderr)
        return 143
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
    return 0
