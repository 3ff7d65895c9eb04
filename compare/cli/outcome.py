"""What a handler returns, the input errors it raises, and the one finishing path every command
takes (the caution, the optional ``--png`` figure and ``--report`` folder)."""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Any, Callable

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
    ``result.json`` included)."""
    doc["caution"] = CAUTION
    png = getattr(args, "png", None)
    if png and figure is not None:
        tmp = f"{png}.tmp-{os.getpid()}"
        figure().savefig(tmp, format="png", dpi=120)
        os.replace(tmp, png)
        text += f"\n\nfigure written to {png}"
        doc["png"] = str(png)
    if getattr(args, "report", None) and report is not None:
        doc["report"] = os.path.join(args.report, "report.html")
        files = report(args.report)
        text += f"\n\nreport written to {files.html}"
    elif figure is not None and not png:
        text += "\n\n(draw it with --png FILE or --report DIR)"
    return Outcome(text=text + "\n\n" + CAUTION, json=doc)
