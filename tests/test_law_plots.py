"""The pictures of return laws draw what they say (matplotlib, Agg backend)."""

from __future__ import annotations

from datetime import date

import numpy as np
import pytest

import fairpath as fp
from fairpath.plots import horizon_returns, shock_densities


@pytest.fixture(autouse=True)
def _headless(monkeypatch):
    # pyplot is imported lazily by the plots, so this picks the backend when it is first needed
    monkeypatch.setenv("MPLBACKEND", "Agg")


def _closes(n=400, seed=5):
    rng = np.random.default_rng(seed)
    return 50.0 * np.exp(np.cumsum(0.01 * rng.standard_t(5, n)))


def _market():
    return fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.03),
                     (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.25), 0.02),))


def test_shock_densities_draws_one_curve_per_law_and_the_reference():
    laws = [fp.NormalLaw(), fp.StudentT(4.0), fp.EmpiricalLaw.from_closes(_closes(), "sim")]
    fig = shock_densities(laws)
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels == ["standard normal"] + [law.describe() for law in laws]
    assert ax.get_yscale() == "log"
    t_line = ax.get_lines()[2]
    x, y = t_line.get_data()
    # the averaged density integrates to about one over [-8, 8]
    assert abs(np.nansum(y) * (x[1] - x[0]) - 1.0) < 0.01


def test_shock_densities_exact_density_labels_and_refusals():
    fig = shock_densities([fp.StudentT(5.0)], normal=False, width=0, log=False,
                          labels=["fat"])
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["fat"]
    assert ax.get_yscale() == "linear"
    with pytest.raises(fp.InputError):
        shock_densities([])
    with pytest.raises(fp.InputError):
        shock_densities([fp.StudentT(5.0)], labels=["a", "b"])


def test_horizon_returns_one_curve_per_market():
    m = _market()
    fig = horizon_returns([m, m.with_law(fp.StudentT(4.0), ["NORDA"])], "NORDA",
                          date(2026, 12, 15), paths=2048, seed=1)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels[0] == "standard normal"
    assert labels[1].startswith("normal, excess kurtosis")
    assert labels[2].startswith("Student-t (dof 4), excess kurtosis")
    with pytest.raises(fp.InputError):
        horizon_returns([m], "NORDA", date(2026, 12, 1))
