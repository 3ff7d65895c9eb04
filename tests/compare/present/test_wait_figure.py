"""The waiting-time figure per service target (compare.present.wait_figure): served waits and
abandoners' times apart, and a service level read from those waits that agrees with the
simulator's ``served_within`` under each convention (the project's own definitions, design.md
§4.2; exact on one replication with no warm-up, where the recorded waits are the jobs both
count)."""

from __future__ import annotations

import textwrap

import numpy as np
import pytest

from compare.present.wait_figure import (convention_share, pooled_outcome_waits,
                                         service_waits_figure)
from desim import run_replication
from fluid.loading import load_scenario_text

STATION = """
    name: M/M/2+M (invented)
    time_unit: min
    run: {horizon: 300, warmup: 0, replications: 1, seed: 3}
    sources:
      calls: {rate: 2.2, into: queue}
    pools:
      agents: 2
    places:
      queue: {patience: {dist: exponential, mean: 1}}
      talk: {hold: {dist: exponential, mean: 1}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.3, goal: 0.8, abandoned: CONVENTION}
"""


@pytest.mark.parametrize("convention", ["against", "excluded", "{excluded_within: 0.2}"])
def test_figure_service_level_agrees_with_the_simulator(convention):
    s = load_scenario_text(textwrap.dedent(STATION).replace("CONVENTION", convention))
    target = s.targets.service["queue"]
    run = run_replication(s, 0, record_waits=True)
    waits = pooled_outcome_waits([run], ["queue"])["queue"]
    assert waits["abandoned"].size > 20  # (abandoners enough for the conventions to differ)
    assert convention_share(target, waits["taken"], waits["abandoned"]) == pytest.approx(
        run.places["queue"]["served_within"], abs=1e-15)
    fig = service_waits_figure({"queue": waits}, s.targets.service, "min")
    (ax,) = fig.axes
    assert "queue" in ax.get_title() and "abandoners" in ax.get_title()
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any(lab.startswith("served: wait") for lab in labels)
    assert any(lab.startswith("abandoned: time to abandon") for lab in labels)


def test_no_waits_gives_a_plain_panel():
    s = load_scenario_text(textwrap.dedent(STATION).replace("CONVENTION", "against"))
    fig = service_waits_figure({}, s.targets.service, "min")
    assert len(fig.axes) == 1
    assert np.isnan(convention_share(s.targets.service["queue"], np.array([]), np.array([])))
