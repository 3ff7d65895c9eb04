"""Random streams keyed by name."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from desim import stable_hash, stream_rng


def test_stable_hash_is_crc32():
    # The CRC-32 check value of "123456789" is 0xCBF43926 (the standard check value of the
    # IEEE 802.3 CRC, common practice for testing CRC implementations).
    assert stable_hash("123456789") == 0xCBF43926


def test_streams_differ_by_kind_name_and_replication_and_repeat_exactly():
    draws = {
        key: stream_rng(7, rep, kind, name).random(4).tolist()
        for key in [(0, "hold", "talk"), (0, "patience", "talk"), (0, "hold", "queue"),
                    (1, "hold", "talk")]
        for rep, kind, name in [key]
    }
    assert len({tuple(v) for v in draws.values()}) == 4
    assert stream_rng(7, 0, "hold", "talk").random(4).tolist() == draws[(0, "hold", "talk")]
    with pytest.raises(ValueError):
        stream_rng(7, 0, "holds", "talk")


def test_streams_are_the_same_in_another_process():
    # Python's hash() is salted per process; the stream key must not be.
    code = ("from desim import stream_rng; "
            "print(repr(stream_rng(3, 2, 'arrivals', 'calls').random()))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, env={"PYTHONHASHSEED": "123", "PATH": ""},
                         cwd=Path(__file__).resolve().parents[2])
    assert float(out.stdout) == stream_rng(3, 2, "arrivals", "calls").random()
    assert np.isfinite(float(out.stdout))
