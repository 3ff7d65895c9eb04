"""Variants of a scenario keep their stored document, and so their run-folder fingerprint,
consistent with their fields: a resumed staffing search or scale study never mixes the
replications of two plans (desim.store.scenario_fingerprint reads the document)."""

from __future__ import annotations

import json
import pathlib

from compare.study.scale import scale_scenario
from desim.store import scenario_fingerprint
from fluid import load_scenario
from fluid.loading import scenario_from_document
from fluid.staffing import plan_view, with_staff

ROOT = pathlib.Path(__file__).resolve().parents[2]


def _revalidated(s):
    """The scenario rebuilt from its own stored document."""
    return scenario_from_document(json.loads(s.document), file=s.file, base_dir=s.base_dir)


def test_variants_have_their_own_fingerprint_and_a_document_that_matches_their_fields():
    s = load_scenario(ROOT / "configs" / "utility-line.yaml")
    base = scenario_fingerprint(s)
    variants = [with_staff(s, {"front_desk": 15}), scale_scenario(s, 2.0)[0]]
    for v in variants:
        assert scenario_fingerprint(v) != base
        assert _revalidated(v) == v  # the document says exactly what the fields say
    # the same changes again give the same fingerprint (a resume finds its own folder)
    assert scenario_fingerprint(with_staff(s, {"front_desk": 15})) == scenario_fingerprint(
        variants[0])
    assert scenario_fingerprint(with_staff(s, {"front_desk": 14})) == base  # no change at all
    # the fluid plan's view of a day (profiles at their mean rates) is another net: another
    # fingerprint; the demo's view (constant rates, no priority at a job place) is the same net
    day = load_scenario(ROOT / "configs" / "day-with-shifts.yaml")
    view = plan_view(day)
    assert scenario_fingerprint(view) != scenario_fingerprint(day)
    assert all("rate" in src for src in json.loads(view.document)["sources"].values())
    assert scenario_fingerprint(plan_view(s)) == base
