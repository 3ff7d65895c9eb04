"""The ``fluidgap`` command line: parses arguments, calls the library, prints.

Exit codes: 0 success; 2 bad input or usage (one line on stderr naming the file and field);
1 an internal error (set FLUIDGAP_DEBUG=1 for the traceback).
"""

from __future__ import annotations

import json
import math
import os
import sys
import traceback
import warnings
from typing import Any, Sequence

from desim import DaskError, SettingsError, StoreError
from desim.engine import ClockStopped
from fluid.errors import ScenarioError, printable

from .outcome import InputError
from .parser import UsageError, build_parser

__all__ = ["main"]


def _emit_json(doc: Any) -> None:
    json.dump(_jsonable(doc), sys.stdout, indent=2, allow_nan=False)
    sys.stdout.write("\n")


def _jsonable(x: Any) -> Any:
    """JSON has no inf or nan: both become null."""
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if hasattr(x, "item") and callable(x.item) and getattr(x, "shape", None) == ():
        return _jsonable(x.item())
    return x


#: The longest line printed for an error or a warning (characters).
LINE_CHARS = 2000


def _say(text: str) -> None:
    """One line on stderr, whatever ``text`` holds (newlines and control characters are
    written as escapes, a very long text is cut)."""
    print(printable(text, LINE_CHARS), file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``fluidgap`` console script."""
    parser = build_parser()
    command = "fluidgap"
    try:
        args = parser.parse_args(argv)
        command = f"fluidgap {args.command}"
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
