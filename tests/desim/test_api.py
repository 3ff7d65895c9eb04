"""The public API of ``desim`` (design.md §5): what ``__init__`` exports, ``desim.replicate``
and the tidy table of its result."""

from __future__ import annotations

import subprocess
import sys
import types

import pytest

import desim

from .test_runs import MMC

#: what desim/__init__.py exported before the exports became lazy: every one must stay
EARLIER = {"ConservationError", "DaskError", "DaskUnavailable", "DEFAULT_MAX_JOBS", "Estimate",
           "MserResult", "RunResult", "RunStore", "SimulationError", "SimulationResult",
           "StoreError", "WarmupSuggestion", "dask_executor", "mser5", "replicate",
           "run_replication", "run_replications", "stable_hash", "stream_rng", "waiting_places"}
#: added since: the one settings object of a simulation
ADDED = {"SettingsError", "SimulationSettings", "resolve_settings"}


def test_all_lists_exactly_the_public_names():
    assert set(desim.__all__) == EARLIER | ADDED
    assert len(set(desim.__all__)) == len(desim.__all__)
    namespace: dict = {}
    exec("from desim import *", namespace)
    assert set(namespace) - {"__builtins__"} == set(desim.__all__)
    public = {n for n in dir(desim) if not n.startswith("_")
              and not isinstance(getattr(desim, n), types.ModuleType)}
    assert public == set(desim.__all__)
    with pytest.raises(AttributeError, match="no attribute 'nothing'"):
        desim.nothing  # noqa: B018


@pytest.mark.parametrize("name", ["replicate", "dask_executor"])
@pytest.mark.parametrize("first", [
    "import desim.{name}",
    "from desim.{name} import {name}",
    "from desim import {name}",
    "import desim",
    "import desim; desim.DaskError; desim.run_replications",
])
def test_functions_named_like_their_module_stay_functions(name, first):
    # the submodules desim.replicate and desim.dask_executor share their function's name:
    # however the two are reached, the package attribute is the function (as when __init__
    # imported them eagerly)
    code = (f"{first.format(name=name)}\nimport desim\nimport desim.{name} as m\n"
            f"from desim import {name} as g\nfrom desim.{name} import {name} as f\n"
            f"print(desim.{name} is g is m is f, callable(g))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["True", "True"]


def test_replicate_and_its_tidy_frame(net):
    s = net(MMC)  # M/M/10 with patience and a service target
    result = desim.replicate(s, reps=4, horizon=200, warmup=20, seed=5, workers=1)
    assert isinstance(result, desim.SimulationResult)
    frame = result.to_frame()
    assert list(frame.columns) == ["kind", "name", "metric", "mean", "low", "high", "n"]
    assert not frame.duplicated(["kind", "name", "metric"]).any()  # one row per figure
    assert set(frame.kind) == {"transition", "place", "pool", "source"}
    for kind, name, metric, mean, low, high, n in frame.itertuples(index=False):
        table = {"transition": result.transitions, "place": result.places,
                 "pool": result.pools, "source": result.sources}[kind]
        est = table[name][metric]
        assert (mean, n) == (est.mean, est.n)
        assert low == est.low or (low != low and est.low != est.low)  # nan stays nan
        assert high == est.high or (high != high and est.high != est.high)
    busy = frame[(frame.kind == "pool") & (frame.name == "agents") & (frame.metric == "busy")]
    assert busy.n.item() == 4 and busy.low.item() <= busy["mean"].item() <= busy.high.item()
