"""The ``fluidgap`` command line: parses arguments, calls the library, prints.

Exit codes: 0 success; 2 bad input or usage (one line on stderr naming the file and field);
1 an internal error (set FLUIDGAP_DEBUG=1 for the traceback); 130 interrupted (SIGINT) and 143
terminated (SIGTERM), one line each, worker processes ended first.
"""

from __future__ import annotations

import json
import os
import signal
import sys
import traceback
import warnings
from typing import Any, Sequence

from desim import DaskError, SettingsError, StoreError
from desim.engine import ClockStopped
from fluid.errors import ScenarioError, printable
from fluid.json_values import json_ready

from .destinations import check_destinations
from .outcome import InputError
from .parser import UsageError, build_parser

__all__ = ["main", "Terminated"]


class Terminated(BaseException):
    """SIGTERM received: unwinds like KeyboardInterrupt (a BaseException, so that no
    ``except Exception`` on the way swallows it), ending worker processes and temporary files
    on the way out."""


def _terminated(signum, frame) -> None:
    # one is enough: a second SIGTERM while the first unwinds would interrupt the clean-up
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    raise Terminated()


def _on_sigterm():
    """Install the SIGTERM handler for one call of :func:`main`; returns the handler to put
    back (None when signals cannot be set here: not the main thread)."""
    try:
        return signal.signal(signal.SIGTERM, _terminated)
    except ValueError:
        return None


def _emit_json(doc: Any) -> None:
    json.dump(json_ready(doc), sys.stdout, indent=2, allow_nan=False)
    sys.stdout.write("\n")


#: The longest line printed for an error or a warning (characters).
LINE_CHARS = 2000


def _say(text: str) -> None:
    """One line on stderr, whatever ``text`` holds (newlines and control characters are
    written as escapes, a very long text is cut)."""
    print(printable(text, LINE_CHARS), file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``fluidgap`` console script."""
    parser = build_parser()
    previous = _on_sigterm()
    try:
        return _main(parser, argv)
    except Terminated:  # arrived while the outcome or an error was being reported
        print("fluidgap: terminated", file=sys.stderr)
        return 143
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _main(parser, argv) -> int:
    command = "fluidgap"
    try:
        args = parser.parse_args(argv)
        command = f"fluidgap {args.command}"
        check_destinations(args)  # every place it will write, before it computes anything
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            outcome = args.handler(args)
        for w in caught:
            if not issubclass(w.category, (DeprecationWarning, PendingDeprecationWarning)):
                _say(f"warning: {w.message}")
        if args.json:
            _emit_json(outcome.json)
        else:
            print(outcome.text)
        return outcome.exit_code
    except (ScenarioError, UsageError, InputError, StoreError, DaskError, ClockStopped) as exc:
        _say(str(exc))
        return 2
    except SettingsError as exc:  # a setting a study derived (e.g. its interval) from the flags
        _say(exc.for_flag(command))
        return 2
    except KeyboardInterrupt:
        print("fluidgap: interrupted", file=sys.stderr)
        return 130
    except Terminated:
        print("fluidgap: terminated", file=sys.stderr)
        return 143
    except BrokenPipeError:
        return 0
    except Exception as exc:  # an internal error: say so plainly, full trace on request
        if os.environ.get("FLUIDGAP_DEBUG"):
            traceback.print_exc()
        _say(f"fluidgap: internal error: {type(exc).__name__}: {exc} "
             "(set FLUIDGAP_DEBUG=1 for the traceback)")
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
