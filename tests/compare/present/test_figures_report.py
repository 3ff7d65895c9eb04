"""Figures and the HTML report (compare.present.figures, compare.present.html).

The inputs here are small synthetic data made up in the tests (invented: rendering checks, not
statistics), except one short real replication that checks :func:`pooled_waits` reads what
``desim`` records. Expected values are derived by hand in the comments.
"""

from __future__ import annotations

import base64
import json
import math
import os
from html.parser import HTMLParser
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection, PolyCollection
from matplotlib.figure import Figure

from compare.present.figures import (OPTIMISTIC, _ccdf, pooled_waits, rates_figure, scale_figure,
                             transient_figure, waits_figure)
from compare.present.html import ReportFiles, json_ready, write_report
from desim.estimate import Estimate


# --- rates ----------------------------------------------------------------------------------------


def _est(mean, low, high, n=10):
    return Estimate(mean, low, high, n)


def test_rates_figure_marks_fluid_above_interval_as_optimistic():
    sim = {"answer": _est(1.6, 1.5, 1.7), "close": _est(1.0, 0.9, 1.1),
           "drop": _est(0.5, 0.45, 0.55)}
    fluid = {"answer": 2.0, "close": 1.05, "drop": 0.3}
    fig = rates_figure(fluid, sim, "min")
    assert isinstance(fig, Figure)
    (ax,) = fig.axes
    assert ax.get_xlabel() == "rate (firings per min)"
    assert ax.get_title()
    # first transition on top (highest y)
    rows = {t.get_text(): y for t, y in zip(ax.get_yticklabels(), ax.get_yticks())}
    assert rows == {"answer": 2, "close": 1, "drop": 0}
    scatters = {c.get_label(): c for c in ax.collections if isinstance(c, PathCollection)}
    above = scatters["fluid above the interval (optimistic)"]
    inside = scatters["fluid inside the interval"]
    below = scatters["fluid below the interval"]
    # answer: 2.0 > 1.7 (above); close: 1.05 in [0.9, 1.1]; drop: 0.3 < 0.45 (below)
    assert above.get_offsets()[:, 0].tolist() == [2.0]
    assert inside.get_offsets()[:, 0].tolist() == [1.05]
    assert below.get_offsets()[:, 0].tolist() == [0.3]
    assert tuple(above.get_facecolor()[0][:3]) == pytest.approx(
        tuple(int(OPTIMISTIC[i:i + 2], 16) / 255 for i in (1, 3, 5)))
    # right margin, the sign of every gap (issue 13 item 5): (mean - fluid) / |fluid| =
    # (1.6 - 2.0) / 2.0 = -20.0 %, (1 - 1.05) / 1.05 = -4.8 %, (0.5 - 0.3) / 0.3 = +66.7 %
    texts = {t.get_text() for t in ax.texts}
    assert {"-20.0 %", "-4.8 %", "+66.7 %"} <= texts
    legend = fig.legends[0]
    assert "simulated mean, 95 % interval" in [t.get_text() for t in legend.get_texts()]


def test_rates_figure_without_interval_or_fluid_value():
    # n = 1: no interval (nan bounds) -> fluid counts as inside; a transition with no fluid rate
    sim = {"a": _est(1.0, math.nan, math.nan, 1), "b": _est(2.0, 1.9, 2.1)}
    fig = rates_figure({"a": 3.0}, sim, "h", log=True)
    (ax,) = fig.axes
    assert ax.get_xscale() == "log"
    labels = [c.get_label() for c in ax.collections if isinstance(c, PathCollection)]
    assert labels == ["fluid inside the interval"]


# --- waits ----------------------------------------------------------------------------------------


def test_ccdf_by_hand():
    # waits 0, 0, 1, 2: P(W > 0) = 2/4, P(W > 1) = 1/4, P(W > 2) = 0
    xs, ys = _ccdf(np.array([1.0, 0.0, 2.0, 0.0]))
    assert xs.tolist() == [0.0, 1.0, 2.0]
    assert ys.tolist() == [0.5, 0.25, 0.0]


def test_waits_figure_panels_target_line_and_share():
    waits = {"front_queue": np.array([0.0, 0.0, 1.0, 2.0]), "billing_queue": np.array([0.5, 3.0]),
             "empty": np.array([])}
    fig = waits_figure(waits, "min", {"front_queue": 0.5})
    assert len(fig.axes) == 3
    ax = fig.axes[0]
    assert ax.get_title() == "front_queue (4 waits)"
    assert ax.get_xlabel() == "wait t (min)"
    assert ax.get_ylabel() == "share waiting longer than t"
    step, target = ax.get_lines()
    assert target.get_xdata()[0] == 0.5 and target.get_linestyle() == "--"
    # P(W > 0.5) over 0, 0, 1, 2 = 2/4
    assert [t.get_text() for t in ax.texts] == ["50.0% wait longer"]
    assert step.get_ydata()[0] == 0.5  # share that waited at all
    assert len(fig.axes[1].get_lines()) == 1  # no target there
    assert fig.axes[2].texts[0].get_text() == "no waits recorded"
    assert fig.get_suptitle()


def test_waits_figure_with_no_places():
    fig = waits_figure({}, "min")
    assert "no waits recorded" in [t.get_text() for t in fig.axes[0].texts]


def test_pooled_waits_from_fake_runs():
    runs = [SimpleNamespace(waits={"q": {"taken": np.array([0.0, 1.0]),
                                         "abandoned": np.array([2.0])},
                                   "talk": {"taken": np.array([0.0]), "abandoned": np.array([])}}),
            SimpleNamespace(waits={"q": {"taken": np.array([3.0]), "abandoned": np.array([])},
                                   "talk": {"taken": np.array([0.0]), "abandoned": np.array([])}})]
    # "talk" never has a positive wait: left out by default
    assert {p: w.tolist() for p, w in pooled_waits(runs).items()} == {"q": [0.0, 1.0, 2.0, 3.0]}
    assert pooled_waits(runs, which="taken")["q"].tolist() == [0.0, 1.0, 3.0]
    assert pooled_waits(runs, places=["talk"], which="abandoned")["talk"].size == 0
    with pytest.raises(ValueError, match="record_waits"):
        pooled_waits([SimpleNamespace(waits=None)])
    with pytest.raises(ValueError):
        pooled_waits(runs, which="served")


def test_pooled_waits_reads_desim_records():
    from desim import replicate
    from fluid.loading import load_scenario
    from fluid.structure import waiting_places

    scenario = load_scenario(Path(__file__).parents[3] / "configs" / "single-station.yaml")
    result = replicate(scenario, reps=2, horizon=60, warmup=10, workers=1, record_waits=True)
    waits = pooled_waits(result.runs, places=waiting_places(scenario))
    assert list(waits) == ["queue"]
    # every token that left the queue in the window has a wait: the counts must match
    left = sum(r.places["queue"]["left"] for r in result.runs)
    assert waits["queue"].size == left
    assert isinstance(waits_figure(waits, scenario.time_unit, {"queue": 0.5}), Figure)


# --- transient ------------------------------------------------------------------------------------


def _transient_table() -> pd.DataFrame:
    rows = []
    for i in range(3):
        start, end = 10.0 * i, 10.0 * (i + 1)
        rows.append((i, start, end, "arrivals", "", 20.0, 18.0 + i, 15.0, 21.0 + i, 5))
        rows.append((i, start, end, "queue", "front", 0.0, 0.4, -0.2, 1.0, 5))  # low < 0
        rows.append((i, start, end, "service_level", "front", math.nan, 0.9, 0.8, 1.05, 5))
    return pd.DataFrame(rows, columns=["interval", "start", "end", "metric", "name", "fluid",
                                       "mean", "low", "high", "n"])


def test_transient_figure_panels_lines_and_clipped_bands():
    fig = transient_figure(_transient_table(), "min", warmup=10.0)
    assert [ax.get_title() for ax in fig.axes] == ["arrivals", "queue: front",
                                                   "service_level: front"]
    arrivals, queue, level = fig.axes
    assert arrivals.get_xlabel() == "time (min)"
    assert arrivals.get_ylabel() == "arrivals per interval"
    assert queue.get_ylabel() == "mean jobs waiting"
    assert [ln.get_label() for ln in arrivals.get_lines()] == ["simulated mean", "fluid"]
    # the service level has no fluid value: only the simulated line
    assert [ln.get_label() for ln in level.get_lines()] == ["simulated mean"]
    # step vertices: the three starts and the last end; fluid constant 20
    fluid = arrivals.get_lines()[1]
    assert fluid.get_xdata().tolist() == [0.0, 10.0, 20.0, 30.0]
    assert fluid.get_ydata().tolist() == [20.0] * 4
    # bands clipped to the metric's range: queue >= 0, share <= 1
    band = [c for c in queue.collections if isinstance(c, PolyCollection)
            and c.get_label() == "simulated 95 % interval"][0]
    assert band.get_paths()[0].vertices[:, 1].min() == 0.0
    band = [c for c in level.collections if isinstance(c, PolyCollection)
            and c.get_label() == "simulated 95 % interval"][0]
    assert band.get_paths()[0].vertices[:, 1].max() == 1.0
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels[0].startswith("warm-up") and "fluid" in labels


def test_transient_figure_rejects_missing_columns():
    with pytest.raises(ValueError, match="lacks columns"):
        transient_figure(_transient_table().drop(columns=["low"]), "min")


# --- scale ----------------------------------------------------------------------------------------


def test_scale_figure_fit_and_reference_slope():
    k = np.array([1.0, 2.0, 4.0, 8.0])
    table = pd.concat([
        pd.DataFrame({"factor": k, "measure": "wait", "gap": 0.4 * k ** -0.5,
                      "low": 0.3 * k ** -0.5, "high": 0.5 * k ** -0.5}),
        # a negative gap is plotted by its size; a zero gap cannot sit on a log axis
        pd.DataFrame({"factor": k, "measure": "rate", "gap": [-0.1, -0.05, 0.0, -0.02]}),
    ])
    fits = {"wait": {"exponent": -0.5, "coefficient": 0.4, "exponent_low": -0.6,
                     "exponent_high": -0.4},
            "rate": -0.7}
    fig = scale_figure(table, fits)
    (ax,) = fig.axes
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert "scale factor" in ax.get_xlabel() and "relative gap" in ax.get_ylabel()
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels[0] == "wait"
    assert labels[1] == "wait fit: gap ∝ $k^{-0.50}$ (exponent -0.60 to -0.40)"
    assert labels[3] == "rate fit: gap ∝ $k^{-0.70}$"
    assert labels[-1] == "reference: slope −1/2"
    lines = {ln.get_label(): ln for ln in ax.get_lines()}
    fit = lines[labels[1]]
    assert fit.get_ydata() == pytest.approx(0.4 * fit.get_xdata() ** -0.5)
    ref = lines["reference: slope −1/2"]
    x, y = ref.get_xdata(), ref.get_ydata()
    slope = (math.log(y[-1]) - math.log(y[0])) / (math.log(x[-1]) - math.log(x[0]))
    assert slope == pytest.approx(-0.5)
    # rate points: three of four (the zero gap dropped), drawn as sizes 0.1, 0.05, 0.02
    (rate_points,) = [c for c in ax.containers if c.get_label() == "rate"]
    assert rate_points.lines[0].get_ydata().tolist() == [0.1, 0.05, 0.02]
    # rate fit without a coefficient: least squares on the logs with b = -0.7 fixed
    a = math.exp(np.mean(np.log([0.1, 0.05, 0.02]) + 0.7 * np.log([1.0, 2.0, 8.0])))
    rate_fit = lines[labels[3]]
    assert rate_fit.get_ydata() == pytest.approx(a * rate_fit.get_xdata() ** -0.7)


def test_scale_figure_without_positive_gaps():
    table = pd.DataFrame({"factor": [1.0, 2.0], "measure": ["wait", "wait"], "gap": [0.0, 0.0]})
    fig = scale_figure(table)
    assert "no positive gaps to plot" in [t.get_text() for t in fig.axes[0].texts]


# --- report ---------------------------------------------------------------------------------------


class _TagCounter(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: dict[str, int] = {}
        self.attrs: list[tuple[str, str, str]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags[tag] = self.tags.get(tag, 0) + 1
        self.attrs += [(tag, k, v) for k, v in attrs]

    def handle_data(self, data):
        self.text.append(data)


def _parse(path: Path) -> _TagCounter:
    p = _TagCounter()
    p.feed(path.read_text(encoding="utf-8"))
    p.close()
    return p


def _small_figure(title: str) -> Figure:
    fig = Figure(figsize=(2, 1.5))
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1])
    fig.suptitle(title)
    return fig


def _tables() -> dict[str, pd.DataFrame]:
    return {
        "gaps": pd.DataFrame({"name": ["answer", "close"], "fluid": [2.0, 1.0 / 3.0],
                              "mean": [1.8, math.nan], "n": [10, 10], "flag": [True, False]}),
        "loads": pd.DataFrame({"pool": ["agents"], "load": [0.8333333333333334]}),
    }


def test_write_report_files_parse_and_round_trip(tmp_path):
    out = tmp_path / "new" / "report"  # created with its parents
    tables = _tables()
    figures = {"rates": _small_figure("Rates"), "waits": _small_figure("Waits")}
    doc = {"a": math.nan, "b": [1.0, math.inf, -math.inf], "c": np.float64(2.5),
           "d": np.arange(3), "e": (1, "x"), "est": Estimate(1.0, math.nan, math.nan, 1)}
    files = write_report(out, title="Fluid against simulation", summary_lines=["one", "two"],
                         tables=tables, figures=figures, json_doc=doc,
                         caution="Decision support only.", write_png=True)
    assert isinstance(files, ReportFiles)
    assert all(p.is_file() for p in files.paths)
    assert files.paths[-1] == out / "report.html"
    assert sorted(p.name for p in out.iterdir()) == sorted(
        ["report.html", "result.json", "gaps.csv", "loads.csv", "rates.png", "waits.png"])

    parsed = _parse(files.html)
    assert parsed.tags["img"] == len(figures)
    assert parsed.tags["table"] == len(tables)
    assert parsed.tags["caption"] == len(tables)
    # self-contained: every src is inline data, no links to fetch, no scripts
    srcs = [v for tag, k, v in parsed.attrs if k in ("src", "href")]
    assert len(srcs) == 2 and all(v.startswith("data:image/png;base64,") for v in srcs)
    assert "script" not in parsed.tags and "link" not in parsed.tags
    png = base64.b64decode(srcs[0].split(",", 1)[1])
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    alts = [v for tag, k, v in parsed.attrs if tag == "img" and k == "alt"]
    assert alts == ["Rates", "Waits"]
    text = " ".join(parsed.text)
    html_text = files.html.read_text(encoding="utf-8")
    assert html_text.index("Decision support only.") < html_text.index("<h2>Summary</h2>")
    assert "one" in text and "two" in text

    for name, table in tables.items():
        back = pd.read_csv(files.csv[name])
        pd.testing.assert_frame_equal(back, table)

    loaded = json.loads(files.json.read_text())
    assert loaded == {"a": None, "b": [1.0, None, None], "c": 2.5, "d": [0, 1, 2], "e": [1, "x"],
                      "est": {"mean": 1.0, "low": None, "high": None, "n": 1}}
    assert (files.png["rates"]).read_bytes()[:4] == b"\x89PNG"
    assert oct(files.html.stat().st_mode & 0o777) == oct(0o644)


def test_write_report_keeps_meaningful_index(tmp_path):
    table = pd.DataFrame({"rate": [1.5, 2.5]}, index=pd.Index(["a", "b"], name="transition"))
    files = write_report(tmp_path, title="t", summary_lines=[], tables={"rates": table},
                         figures={}, json_doc={}, caution="")
    back = pd.read_csv(files.csv["rates"])
    assert back.columns.tolist() == ["transition", "rate"]
    assert back["transition"].tolist() == ["a", "b"]
    assert 'class="caution"' not in files.html.read_text()  # no empty caution box


def test_write_report_escapes_every_string(tmp_path):
    bad = "<script>alert(1)</script>"
    tables = {"t": pd.DataFrame({bad: [bad], "x": [1.0]})}
    files = write_report(tmp_path, title=bad, summary_lines=[bad], tables=tables,
                         figures={"f": _small_figure(bad)}, json_doc={"s": bad}, caution=bad)
    html_text = files.html.read_text(encoding="utf-8")
    assert "<script" not in html_text
    assert html_text.count("&lt;script&gt;") >= 6  # title x2, caution, summary, header, cell, alt
    assert "script" not in _parse(files.html).tags


def test_failing_figure_leaves_nothing_behind(tmp_path):
    out = tmp_path / "report"
    broken = _small_figure("broken")

    def savefig(*args, **kwargs):
        raise RuntimeError("renderer failed")

    broken.savefig = savefig
    with pytest.raises(RuntimeError, match="renderer failed"):
        write_report(out, title="t", summary_lines=[], tables=_tables(),
                     figures={"ok": _small_figure("ok"), "broken": broken}, json_doc={},
                     caution="c")
    assert not out.exists()  # nothing was created, not even the directory


def test_failure_while_moving_keeps_earlier_report_and_removes_temporaries(tmp_path, monkeypatch):
    first = write_report(tmp_path, title="first", summary_lines=[], tables=_tables(),
                         figures={}, json_doc={"v": 1}, caution="c")
    before = first.html.read_bytes()
    real_replace = os.replace
    calls = []

    def replace(src, dst):
        calls.append(dst)
        if str(dst).endswith("result.json"):
            raise OSError("disk full")
        real_replace(src, dst)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(OSError, match="disk full"):
        write_report(tmp_path, title="second", summary_lines=[], tables=_tables(), figures={},
                     json_doc={"v": 2}, caution="c")
    assert first.html.read_bytes() == before  # report.html is moved last: still the first one
    assert json.loads((tmp_path / "result.json").read_text()) == {"v": 1}
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


def test_bad_json_or_names_write_nothing(tmp_path):
    with pytest.raises(TypeError):
        write_report(tmp_path / "a", title="t", summary_lines=[], tables={}, figures={},
                     json_doc={"x": object()}, caution="")
    assert not (tmp_path / "a").exists()
    with pytest.raises(ValueError, match="file name"):
        write_report(tmp_path / "b", title="t", summary_lines=[],
                     tables={"../evil": _tables()["gaps"]}, figures={}, json_doc={}, caution="")
    assert not (tmp_path / "b").exists()


def test_json_ready_is_strict_json():
    doc = json_ready({"x": [math.nan, np.float32(1.5), np.int64(3), np.bool_(True)],
                      "frame": pd.DataFrame({"a": [1.0, math.nan]})})
    assert json.dumps(doc, allow_nan=False) == (
        '{"x": [null, 1.5, 3, true], "frame": [{"a": 1.0}, {"a": null}]}')
