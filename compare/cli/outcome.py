"""What a handler returns, the input errors it raises, and the one finishing path every command
takes (the caution, the optional ``--png`` figure and ``--report`` folder)."""

from __future__ import annotations

import io
import os
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable

from ..present.swap import ReportFolderError, replace_file
from ..present.text import CAUTION

__all__ = ["Outcome", "InputError", "finish"]


class InputError(ValueError):
    """Bad input that is not a scenario field (e.g. a flag's value): exit code 2."""


@dataclass
class Outcome:
    """A command's result: the text for the terminal, the JSON document for ``--json``, and
    the exit code."""

    text: str
    json: Any
    exit_code: int = 0


def finish(args, text: str, doc: dict, *, report: Callable[[str], Any] | None = None,
           figure: Callable[[], Any] | None = None) -> Outcome:
    """Add the caution to ``text`` and ``doc``; with ``--png FILE`` draw ``figure()`` and write
    it (atomically); with ``--report DIR`` call ``report(DIR)``, which writes the report and
    returns its files. The JSON document names what was written (the report's own
    ``result.json`` included). Both destinations were checked before the command computed
    anything (:mod:`compare.cli.destinations`); a write that fails all the same (the disk
    filled meanwhile) is an :class:`InputError` naming the flag and the path."""
    doc["caution"] = CAUTION
    png = getattr(args, "png", None)
    if png and figure is not None:
        buf = io.BytesIO()
        figure().savefig(buf, format="png", dpi=120)
        with _writing(args, "--png", png):
            replace_file(png, buf.getvalue())
        text += f"\n\nfigure written to {png}"
        doc["png"] = str(png)
    if getattr(args, "report", None) and report is not None:
        doc["report"] = os.path.join(args.report, "report.html")
        with _writing(args, "--report", args.report):
            files = report(args.report)
        text += f"\n\nreport written to {files.html}"
    elif figure is not None and not png:
        text += "\n\n(draw it with --png FILE or --report DIR)"
    return Outcome(text=text + "\n\n" + CAUTION, json=doc)


@contextmanager
def _writing(args, flag: str, path):
    command = f"fluidgap {args.command}"
    try:
        yield
    except ReportFolderError as exc:
        raise InputError(f"{command}: {flag} {exc}") from None
    except OSError as exc:
        raise InputError(f"{command}: {flag} {path}: cannot write ({exc.strerror or exc})") \
            from None
