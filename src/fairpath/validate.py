"""Monte Carlo against closed forms: the suite behind ``fairpath validate``.

Each case prices a product by Monte Carlo at a fixed seed and compares it with its published
closed form (Black-Scholes-Merton for calls and puts, the cash-or-nothing formula for digitals);
``z = (MC - closed form) / stderr``. A case fails when ``|z| > Z_LIMIT``.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

from fairpath.estimate import price
from fairpath.market import Asset, DiscountCurve, Market, VolCurve
from fairpath.products.base import Product
from fairpath.products.vanilla import Digital, European

Z_LIMIT = 4.0
VALUATION = date(2026, 12, 1)


@dataclass(frozen=True, slots=True)
class Case:
    name: str
    product: Product
    market: Market
    sampler: str
    antithetic: bool = False
    control: bool = True
    paths: int = 65536
    seed: int = 11


@dataclass(frozen=True, slots=True)
class CaseResult:
    name: str
    sampler: str
    monte_carlo: float
    closed_form: float
    stderr: float
    z: float

    @property
    def ok(self) -> bool:
        return abs(self.z) <= Z_LIMIT

    def to_dict(self) -> dict:
        return {"case": self.name, "sampler": self.sampler, "monte_carlo": self.monte_carlo,
                "closed_form": self.closed_form, "stderr": self.stderr, "z": self.z,
                "ok": self.ok}


def flat_market(spot=100.0, vol=0.25, rate=0.05, dividend_yield=0.02) -> Market:
    """A one-asset market named NORDA with flat inputs."""
    return Market(VALUATION, "EUR", DiscountCurve.flat(rate),
                  (Asset("NORDA", spot, VolCurve.flat(vol), dividend_yield),))


def default_cases() -> list[Case]:
    one_year, three_months, three_years = date(2027, 12, 1), date(2027, 3, 1), date(2029, 12, 3)
    m = flat_market()
    m_noq = flat_market(rate=0.03, dividend_yield=0.0, vol=0.2)
    m_hiq = flat_market(rate=0.01, dividend_yield=0.05, vol=0.35)
    cases = []
    for strike in (80.0, 100.0, 120.0):
        for right in ("call", "put"):
            cases.append(Case(f"european {right} K={strike:g} T=1y q=2%",
                              European(asset="NORDA", right=right, strike=strike,
                                       expiry=one_year), m, "sobol"))
    cases += [
        Case("european call K=105 T=1y pseudo", European(asset="NORDA", right="call",
             strike=105.0, expiry=one_year), m, "pseudo"),
        Case("european put K=95 T=1y pseudo antithetic", European(
             asset="NORDA", right="put", strike=95.0, expiry=one_year), m, "pseudo",
             antithetic=True),
        Case("european call K=100 T=3m q=0 no control", European(
             asset="NORDA", right="call", strike=100.0, expiry=three_months), m_noq, "sobol",
             control=False),
        Case("european put K=110 T=3y q=5% vol 35%", European(
             asset="NORDA", right="put", strike=110.0, expiry=three_years), m_hiq, "sobol"),
        Case("digital call K=100 T=1y", Digital(asset="NORDA", right="call", strike=100.0,
             expiry=one_year), m, "sobol"),
        Case("digital put K=90 T=1y payout 10", Digital(asset="NORDA", right="put",
             strike=90.0, expiry=one_year, payout=10.0), m, "sobol"),
        Case("digital call K=110 T=3y pseudo", Digital(asset="NORDA", right="call",
             strike=110.0, expiry=three_years), m_hiq, "pseudo"),
        Case("digital put K=100 T=3m sobol antithetic", Digital(
             asset="NORDA", right="put", strike=100.0, expiry=three_months), m_noq, "sobol",
             antithetic=True),
    ]
    return cases


def run(cases: list[Case] | None = None) -> list[CaseResult]:
    """Price every case and compare it with its closed form."""
    out = []
    for c in cases or default_cases():
        r = price(c.product, c.market, paths=c.paths, sampler=c.sampler, seed=c.seed,
                  antithetic=c.antithetic, control=c.control)
        ref = c.product.closed_form(c.market)
        z = (r.price - ref) / r.stderr if r.stderr > 0 else (0.0 if r.price == ref else
                                                              float("inf"))
        out.append(CaseResult(c.name, c.sampler, r.price, ref, r.stderr, z))
    return out


def table(results: list[CaseResult]) -> str:
    head = f"{'case':<44} {'sampler':<7} {'Monte Carlo':>12} {'closed form':>12} " \
           f"{'stderr':>10} {'z':>7}  ok"
    lines = [head, "-" * len(head)]
    for r in results:
        lines.append(f"{r.name:<44} {r.sampler:<7} {r.monte_carlo:>12.6f} {r.closed_form:>12.6f} "
                     f"{r.stderr:>10.6f} {r.z:>7.2f}  {'yes' if r.ok else 'NO'}")
    n_bad = sum(not r.ok for r in results)
    lines.append(f"{len(results) - n_bad} of {len(results)} cases within |z| <= {Z_LIMIT:g}")
    return "\n".join(lines)
