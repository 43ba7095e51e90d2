"""The ``screenlab`` command line: a thin layer over the core.

Each sub-command lives in its own module of this package and exposes ``register(sub)`` which
adds an argparse sub-parser whose ``func(args) -> int`` does the work. Exit codes: 0 success
(or nothing to do), 1 data errors, 2 usage errors. A :class:`ScreenlabError` becomes a message
on stderr, never a traceback. Heavy modules are imported inside the command functions so that
``screenlab --help`` starts fast.
"""
from __future__ import annotations

import argparse
import atexit
import gc
import importlib
import os
import sys
import threading

#: net allocations of container objects between two youngest-generation collections in a command's
#: process (Python's default is 700): see :func:`console_main`
COMMAND_GC_THRESHOLD = 200_000
#: the collector thresholds :func:`command_gc_threshold` replaced (None: not replaced in this process)
_REPLACED_GC_THRESHOLD: tuple[int, ...] | None = None

#: sub-command modules, in the order ``--help`` lists them
COMMAND_MODULES = [
    "screenlab.cli.ingest_cmd",
    "screenlab.cli.readings_cmd",
    "screenlab.cli.app_cmd",
    "screenlab.cli.kinetics_cmd",
    "screenlab.cli.stats_cmd",
    "screenlab.cli.decisions_cmd",
    "screenlab.cli.history_cmd",
    "screenlab.cli.report_cmd",
    "screenlab.cli.backup_cmd",
    "screenlab.cli.flags_cmd",
]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="screenlab",
        description="Analyse catalyst screening campaigns: import plates, compute rates, TOF/TON, "
        "Arrhenius/Eyring parameters, rank candidates with their uncertainty, export the shortlist.",
    )
    from screenlab import __version__

    parser.add_argument("--version", action="version", version=f"screenlab {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for mod in COMMAND_MODULES:
        importlib.import_module(mod).register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    from screenlab.errors import ScreenlabError, StoreBusyError, UsageError

    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except UsageError as exc:
        print(f"screenlab {args.command}: {exc}", file=sys.stderr)
        return 2
    except StoreBusyError as exc:
        print(f"screenlab {args.command}: {exc}", file=sys.stderr)
        return 1
    except ScreenlabError as exc:
        print(f"screenlab {args.command}: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader (e.g. `| head`) closed the pipe: not an error of ours; silence the flush at exit
        import os

        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0


def console_main() -> None:
    """The ``screenlab`` console script and ``python -m screenlab``: :func:`main`, then the end of
    the process.

    The process ends with :func:`os._exit` after its output is flushed and its exit handlers have
    run, where nothing else is left to finish: no other thread, no store connection still open, no
    profiler or tracer attached (they write their results after the program returns). What that
    skips is the interpreter's teardown, which frees the tens of thousands of objects pandas,
    pyarrow and DuckDB leave behind one by one (0.1-0.2 s of a 4-plate ``screenlab rank``) for
    memory the operating system takes back anyway. Elsewhere (or where ``atexit`` cannot be run by
    hand) the usual :func:`sys.exit`. Output that cannot be written (a full disk, an I/O error) is
    reported on stderr and ends the process with status 120, as Python's own exit would; a reader
    that closed the pipe (``| head``) is not an error. :func:`main` itself never ends the process:
    tests and the Python API call it in-process.

    The cyclic garbage collector runs after :data:`COMMAND_GC_THRESHOLD` net allocations instead of
    Python's 700. A command's start-up imports modules that make some 145,000 objects (108,000 of
    them pandas' and NumPy's) which live as long as the process, and with the default thresholds
    the collector walks them again as they age through its generations: 214 collections and 37 ms
    of a 4-plate ``screenlab rank`` (about 5 %), none with this threshold (a 400-plate rank makes
    none either, at the same peak memory). The work itself makes little cyclic garbage (pandas and
    NumPy objects are freed by reference counting), and what it makes is still collected, in
    larger batches. The app server, which runs for hours, gets the thresholds it replaced back
    before it starts (:func:`restore_gc_threshold`).
    """
    command_gc_threshold()
    code = _flushed(main())
    connection = sys.modules.get("screenlab.store.connection")
    if (threading.active_count() == 1 and (connection is None or connection.live_connections() == 0)
            and sys.getprofile() is None and sys.gettrace() is None and hasattr(atexit, "_run_exitfuncs")):
        atexit._run_exitfuncs()
        os._exit(_flushed(code))
    sys.exit(code)


def command_gc_threshold() -> None:
    """The youngest generation collected after :data:`COMMAND_GC_THRESHOLD` net allocations (the
    older generations' thresholds kept); the thresholds it replaces are kept for
    :func:`restore_gc_threshold`."""
    global _REPLACED_GC_THRESHOLD
    if _REPLACED_GC_THRESHOLD is None:
        _REPLACED_GC_THRESHOLD = gc.get_threshold()
    gc.set_threshold(COMMAND_GC_THRESHOLD, *_REPLACED_GC_THRESHOLD[1:])


def restore_gc_threshold() -> None:
    """The collector thresholds :func:`command_gc_threshold` replaced, for a long-running server
    started from a command; nothing when they were not replaced (``main`` called in-process)."""
    global _REPLACED_GC_THRESHOLD
    if _REPLACED_GC_THRESHOLD is not None:
        gc.set_threshold(*_REPLACED_GC_THRESHOLD)
        _REPLACED_GC_THRESHOLD = None


#: exit status when the output could not be written (Python's own, for a failed flush at exit)
OUTPUT_ERROR_STATUS = 120


def _flushed(code: int) -> int:
    """Flush stdout and stderr and return the exit status: ``code``, or
    :data:`OUTPUT_ERROR_STATUS` when stdout could not be written (reported on stderr)."""
    for stream in (sys.stdout, sys.stderr):
        if stream is None:                       # started with the stream closed (cron, >&-)
            continue
        try:
            stream.flush()
        except BrokenPipeError:                  # the reader went away (| head): not an error of ours
            try:
                devnull = os.open(os.devnull, os.O_WRONLY)
                os.dup2(devnull, stream.fileno())
            except (OSError, ValueError):
                pass
        except ValueError:                       # closed or detached by the command: nothing to write
            pass
        except OSError as exc:                   # a full disk, a quota, an I/O error: the output is lost
            if stream is sys.stdout:
                try:
                    os.write(2, f"screenlab: cannot write the output: {exc}\n".encode())
                except OSError:
                    pass
                code = OUTPUT_ERROR_STATUS
    return code
