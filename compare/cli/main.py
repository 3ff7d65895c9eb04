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

from desim import DaskError, StoreError
from fluid.errors import ScenarioError
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
    try:
        args = parser.parse_args(argv)
        check_destinations(args)  # every place it will write, before it computes anything
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            outcome = args.handler(args)
        for w in caught:
            if not issubclass(w.category, (DeprecationWarning, PendingDeprecationWarning)):
                print(f"warning: {w.message}", file=sys.stderr)
        if args.json:
            _emit_json(outcome.json)
        else:
            print(outcome.text)
        return outcome.exit_code
    except (ScenarioError, UsageError, InputError, StoreError, DaskError) as exc:
        print(str(exc), file=sys.stderr)
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
        print(f"fluidgap: internal error: {type(exc).__name__}: {exc} "
              "(set FLUIDGAP_DEBUG=1 for the traceback)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
