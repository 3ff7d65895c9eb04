"""Helpers for the desim tests: scenarios written as YAML text (design.md §3)."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from fluid.loading import load_scenario_text


@pytest.fixture
def net(tmp_path: Path):
    """``net(yaml_text, **traces)`` -> Scenario; each keyword writes a trace file
    ``<name>.txt`` with the given arrival times next to the scenario."""

    def make(text: str, **traces):
        for name, times in traces.items():
            (tmp_path / f"{name}.txt").write_text("\n".join(repr(float(t)) for t in times) + "\n")
        return load_scenario_text(textwrap.dedent(text), file="test.yaml", base_dir=str(tmp_path))

    return make


def fired(trace, what=None):
    """The (time, name, job) triples of a trace, optionally only of one kind of entry."""
    return [(t, n, j) for t, w, n, j in trace if what is None or w == what]
