"""Prices and Greeks of every demo product on the three demo markets, as recorded before the
engine was given its model layer (tests/engine_record.py). A change of structure keeps them;
compared to 1e-12 relative here so that another processor's last-bit differences in numpy's
vectorised exp/log do not fail the suite (``tests/engine_record.py --check`` compares bit for
bit on one machine)."""

from __future__ import annotations

import json
import math

import pytest

from engine_record import RECORD, compute


def _close(a, b, path="") -> list[str]:
    if isinstance(a, dict) and isinstance(b, dict):
        out = [] if set(a) == set(b) else [f"{path}: keys {sorted(a)} != {sorted(b)}"]
        for k in set(a) & set(b):
            out += _close(a[k], b[k], f"{path}/{k}")
        return out
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: length {len(a)} != {len(b)}"]
        return [e for i, (x, y) in enumerate(zip(a, b, strict=True))
                for e in _close(x, y, f"{path}[{i}]")]
    if isinstance(a, float) and isinstance(b, float):
        ok = a == b or math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-15)
        return [] if ok else [f"{path}: {a!r} != {b!r}"]
    return [] if a == b else [f"{path}: {a!r} != {b!r}"]


@pytest.fixture(scope="module")
def now():
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return compute()


def test_every_demo_price_and_greek_is_as_recorded(now):
    before = json.loads(RECORD.read_text())
    problems = _close(before, now)
    assert not problems, "\n".join(problems[:20])
