"""Monte Carlo against closed forms: the suite behind ``fairpath validate``.

Each case prices a product by Monte Carlo at a fixed seed and compares it with its published
closed form: Black-Scholes-Merton for calls and puts, the cash-or-nothing formula for digitals,
the discrete geometric-average formula for geometric Asians, Reiner-Rubinstein for continuously
monitored barriers (with rebate), the exact quadrature price of discretely monitored ones
(the Broadie-Glasserman-Kou shift is only an approximation: its accuracy is measured against
the quadrature in the tests), Stulz's formula for two-asset worst-of and best-of baskets,
a strip of coupons plus a zero-coupon bond minus gap puts for a note that is never called and
knocks in at maturity only, Heston's semi-analytic price (Lewis's integral) for Heston
Europeans, and Black-Scholes-Merton for local-stochastic vol on a flat surface.
``z = (MC - closed form) / stderr``. A case fails when
``|MC - closed form| > Z_LIMIT * stderr + allowance * |closed form|``; the allowance is zero
for every price (exact references) and, for a bumped Greek, the exact bias of the central
difference.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

from fairpath import closed_form as cf
from fairpath.dates import schedule_dates
from fairpath.estimate import price
from fairpath.market import Asset, Correlation, DiscountCurve, Market, VolCurve
from fairpath.products.asian import Asian
from fairpath.products.autocall import Autocallable
from fairpath.products.barrier import Barrier
from fairpath.products.base import Product
from fairpath.products.basket import Basket
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
    #: an explicit reference value, when it is not the product's own closed form
    reference: float | None = None
    #: relative bias allowed on top of Z_LIMIT standard errors (approximate references only)
    allowance: float = 0.0


@dataclass(frozen=True, slots=True)
class CaseResult:
    name: str
    sampler: str
    monte_carlo: float
    closed_form: float
    stderr: float
    z: float
    allowance: float = 0.0

    @property
    def ok(self) -> bool:
        slack = self.allowance * abs(self.closed_form)
        return abs(self.monte_carlo - self.closed_form) <= Z_LIMIT * self.stderr + slack

    def to_dict(self) -> dict:
        return {"case": self.name, "sampler": self.sampler, "monte_carlo": self.monte_carlo,
                "closed_form": self.closed_form, "stderr": self.stderr, "z": self.z,
                "allowance": self.allowance, "ok": self.ok}


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
    cases += path_dependent_cases()
    cases += note_cases()
    cases += smile_cases()
    cases += stochastic_vol_cases()
    return cases


def fixed_coupon_note_reference(note: Autocallable, market: Market) -> float:
    """A note that is never called, always pays its coupon and knocks in at maturity only:
    a strip of discounted coupons, plus a zero-coupon bond, minus ``notional / (k S0)`` gap puts
    struck at ``k S0`` with trigger ``min(barrier, k) S0`` (``k`` the strike level).
    """
    a = market.asset(note.assets[0])
    dates = [d for d in note.observations if d > market.valuation_date]
    coupons = sum(note.coupon * note.notional * float(market.df(d)) for d in dates)
    t = market.time(note.maturity)
    r = float(market.discount.zero(t))
    sigma = float(a.vol.implied(t))
    k = note.strike_level * a.spot
    trigger = min(note.protection_barrier, note.strike_level) * a.spot
    put = cf.gap_option(a.spot, k, trigger, t, r, a.dividend_yield, sigma, "put")
    return coupons + note.notional * float(market.df(note.maturity)) - note.notional / k * put


#: Local volatility reprices its own surface's vanillas within this many vol points (the
#: issue's tolerance: daily log-Euler steps and the table's interpolation).
SMILE_TOLERANCE = 0.003


def smile_cases() -> list[Case]:
    """Local volatility: a flat surface against Black-Scholes-Merton, and the vanillas of a
    skewed surface (SSVI, Gatheral-Jacquier's arbitrage-free parametrisation) repriced within
    ``SMILE_TOLERANCE`` of their implied vols (as a price allowance: vega times it)."""
    from fairpath.market import attach_surface
    from fairpath.surface import VolSurface, ssvi_surface

    r, q = 0.03, 0.01
    curve = DiscountCurve.flat(r)
    tenors = (0.25, 0.5, 1.0, 2.0, 3.0)
    strikes = (0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.35, 1.5)
    flat = VolSurface(tenors, strikes, tuple((0.25,) * len(strikes) for _ in tenors))
    skew = ssvi_surface(tenors, strikes, 0.22, r, q)
    base = Asset("NORDA", 100.0, VolCurve.flat(0.25), q)
    m_flat = Market(VALUATION, "EUR", curve, (attach_surface(base, flat, curve),))
    skewed = attach_surface(base, skew, curve)
    m_skew = Market(VALUATION, "EUR", curve, (skewed,))
    one_year = date(2027, 12, 1)
    cases = [Case("local vol, flat surface: call K=105 1y = BSM", European(
        asset="NORDA", right="call", strike=105.0, expiry=one_year), m_flat, "sobol", seed=51,
        reference=float(cf.bsm_price(100.0, 105.0, m_flat.time(one_year), r, q, 0.25,
                                     "call")))]
    t = m_skew.time(one_year)
    for k, right in ((0.8, "put"), (1.0, "call"), (1.2, "call")):
        vol = float(skewed.surface.implied(t, k))
        ref = float(cf.bsm_price(100.0, 100.0 * k, t, r, q, vol, right))
        vega = float(cf.bsm_greeks(100.0, 100.0 * k, t, r, q, vol, right)["vega"])
        cases.append(Case(f"local vol, SSVI skew: {right} K={100 * k:g} 1y (+-0.3 vol pt)",
                          European(asset="NORDA", right=right, strike=100.0 * k,
                                   expiry=one_year), m_skew, "sobol", seed=52,
                          reference=ref, allowance=SMILE_TOLERANCE * vega / ref))
    return cases


def stochastic_vol_cases() -> list[Case]:
    """Heston by Monte Carlo (QE scheme, no control variates: the semi-analytic price would
    otherwise serve as one) against the semi-analytic price, with the Feller condition
    violated; and local-stochastic vol on a flat surface against Black-Scholes-Merton (its
    leverage undoes the stochastic variance; within ``SMILE_TOLERANCE``)."""
    from fairpath.fourier import heston_price
    from fairpath.market import attach_surface
    from fairpath.stochvol import HestonParams
    from fairpath.surface import VolSurface

    r, q = 0.03, 0.01
    curve = DiscountCurve.flat(r)
    h = HestonParams(0.04, 1.5, 0.05, 0.8, -0.7)  # Feller 2 kappa theta / xi^2 = 0.23
    times = (0.25, 0.5, 1.0, 2.0, 3.0, 5.0)
    asset = Asset("NORDA", 100.0, VolCurve(times, h.term_vols(times)), q, model="heston",
                  heston=h)
    m = Market(VALUATION, "EUR", curve, (asset,))
    cases = []
    for k, right, expiry, seed in ((90.0, "put", date(2028, 12, 1), 61),
                                   (120.0, "call", date(2027, 12, 1), 62)):
        t = m.time(expiry)
        ref = heston_price(100.0, k, t, r, q, *h.numbers, right=right)
        cases.append(Case(f"heston {right} K={k:g} {round(t)}y (Fourier), Feller 0.23",
                          European(asset="NORDA", right=right, strike=k, expiry=expiry), m,
                          "sobol", control=False, seed=seed, reference=ref))
    tenors = (0.25, 0.5, 1.0, 2.0, 3.0)
    strikes = (0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.35, 1.5)
    flat = VolSurface(tenors, strikes, tuple((0.25,) * len(strikes) for _ in tenors))
    lsv = attach_surface(Asset("NORDA", 100.0, VolCurve.flat(0.25), q, model="lsv", heston=h,
                               mixing=1.0), flat, curve)
    m_lsv = Market(VALUATION, "EUR", curve, (lsv,))
    one_year = date(2027, 12, 1)
    t = m_lsv.time(one_year)
    ref = float(cf.bsm_price(100.0, 100.0, t, r, q, 0.25, "call"))
    vega = float(cf.bsm_greeks(100.0, 100.0, t, r, q, 0.25, "call")["vega"])
    cases.append(Case("lsv flat surface: call K=100 1y (+-0.3 vol pt)",
                      European(asset="NORDA", right="call", strike=100.0, expiry=one_year),
                      m_lsv, "sobol", seed=63, reference=ref,
                      allowance=SMILE_TOLERANCE * vega / ref))
    return cases


def note_cases() -> list[Case]:
    m = flat_market()
    obs = schedule_dates({"first": date(2027, 6, 1), "every": "6M", "count": 6})
    never_called = Autocallable(assets=("NORDA",), observations=obs, notional=1000.0,
                                autocall_level=1e6, coupon=0.03, coupon_barrier=0.0,
                                protection_barrier=0.6, protection_monitoring="final")
    return [Case("never-called note, final knock-in (gap put)", never_called, m, "sobol",
                 seed=31, reference=fixed_coupon_note_reference(never_called, m))]


def path_dependent_cases() -> list[Case]:
    """Asian, barrier and basket cases with an exact or published reference."""
    from datetime import timedelta

    weekly = tuple(date(2026, 12, 8) + timedelta(weeks=i) for i in range(52))
    pay = date(2027, 11, 30)
    m = flat_market()
    six_months = date(2027, 6, 1)
    # the barrier setting of Haug's standard barrier table: r = 8%, b = 4%, T ~ 0.5, rebate 3
    h = flat_market(rate=0.08, dividend_yield=0.04, vol=0.25)
    cases = [
        Case("geometric asian call K=100 52 weekly", Asian(
            asset="NORDA", right="call", strike=100.0, fixings=weekly, expiry=pay,
            average="geometric"), m, "sobol", seed=21),
        Case("geometric asian put floating 52 weekly", Asian(
            asset="NORDA", right="put", strike="floating", fixings=weekly, expiry=pay,
            average="geometric"), m, "sobol", seed=22),
        Case("down-and-out call K=100 H=85 continuous", Barrier(
            asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1), barrier=85.0,
            direction="down", effect="out"), m, "sobol", seed=23),
        Case("down-and-out call K=90 H=95 rebate 3", Barrier(
            asset="NORDA", right="call", strike=90.0, expiry=six_months, barrier=95.0,
            direction="down", effect="out", rebate=3.0), h, "sobol", seed=24),
        Case("up-and-in put K=100 H=105 rebate 3", Barrier(
            asset="NORDA", right="put", strike=100.0, expiry=six_months, barrier=105.0,
            direction="up", effect="in", rebate=3.0), h, "sobol", seed=25),
        Case("up-and-out put K=110 H=105 rebate 3 pseudo", Barrier(
            asset="NORDA", right="put", strike=110.0, expiry=six_months, barrier=105.0,
            direction="up", effect="out", rebate=3.0), h, "pseudo", seed=26),
        discrete_case("down-and-in put K=100 H=90 weekly", Barrier(
            asset="NORDA", right="put", strike=100.0, expiry=six_months, barrier=90.0,
            direction="down", effect="in", monitoring=weekly[:26]), h, seed=27),
        discrete_case("up-and-out call K=95 H=115 weekly", Barrier(
            asset="NORDA", right="call", strike=95.0, expiry=six_months, barrier=115.0,
            direction="up", effect="out", monitoring=weekly[:26]), h, seed=29),
        # without control variates: the basket's single-asset vanilla control would be the
        # reference itself
        Case("one-asset basket put = BSM put, no control", Basket(
            assets=("NORDA",), combine="worst", right="put", strike_level=1.0,
            expiry=date(2027, 12, 1), notional=100.0), m, "sobol", seed=28, control=False),
    ]
    pair = two_asset_market()
    for combine, right, seed in (("worst", "call", 32), ("best", "put", 33)):
        b = Basket(assets=("NORDA", "KELPA"), combine=combine, right=right, strike_level=1.0,
                   expiry=date(2027, 12, 1), notional=100.0)
        cases.append(Case(f"{combine}-of {right} NORDA/KELPA rho 0.4 (Stulz)", b, pair,
                          "sobol", seed=seed, reference=stulz_reference(b, pair)))
    return cases


def discrete_case(name: str, product: Barrier, market: Market, seed: int) -> Case:
    """A discretely monitored barrier against its exact quadrature price."""
    a = market.asset(product.asset)
    t = market.time(product.expiry)
    times = [market.time(d) for d in product.monitoring if d > market.valuation_date]
    r, vol = float(market.discount.zero(t)), float(a.vol.implied(t))
    ref = cf.discrete_barrier_quadrature(a.spot, product.strike, product.barrier, times, t, r,
                                         a.dividend_yield, vol, product.right,
                                         product.direction, product.effect)
    return Case(name + " (quadrature)", product, market, "sobol", seed=seed, reference=ref)


def two_asset_market() -> Market:
    """NORDA and KELPA with flat inputs, correlation 0.4."""
    return Market(VALUATION, "EUR", DiscountCurve.flat(0.04),
                  (Asset("NORDA", 100.0, VolCurve.flat(0.25), 0.02),
                   Asset("KELPA", 42.5, VolCurve.flat(0.35), 0.01)),
                  correlation=Correlation(("NORDA", "KELPA"), ((1.0, 0.4), (0.4, 1.0))))


def stulz_reference(b: Basket, market: Market) -> float:
    """A two-asset worst-of or best-of performance basket by Stulz's formula on performances
    (each asset divided by its spot, so both start at 1)."""
    t = market.time(b.expiry)
    a1, a2 = (market.asset(n) for n in b.assets)
    rho = float(market.correlation_matrix(b.assets)[0, 1])
    r = float(market.discount.zero(t))
    unit = cf.two_asset_min_max(1.0, 1.0, b.strike_level, t, r, a1.dividend_yield,
                                a2.dividend_yield, a1.vol.vols[0], a2.vol.vols[0], rho,
                                b.right, "min" if b.combine == "worst" else "max")
    return b.notional * unit


def greek_results() -> list[CaseResult]:
    """European and digital Greeks against their closed forms (bump bias allowed exactly)."""
    from fairpath.greeks import RATE_BUMP, SPOT_BUMP, VOL_BUMP, greeks

    m = flat_market()
    expiry = date(2027, 12, 1)
    t = m.time(expiry)
    r, q, vol, s0 = 0.05, 0.02, 0.25, 100.0
    out = []
    for kind, right, strike in (("european", "call", 100.0), ("european", "put", 90.0),
                                ("digital", "call", 105.0)):
        if kind == "european":
            product = European(asset="NORDA", right=right, strike=strike, expiry=expiry)
            ref = cf.bsm_greeks(s0, strike, t, r, q, vol, right)

            def f(s, v, rr, tt, right=right, strike=strike):
                return cf.bsm_price(s, strike, tt, rr, q, v, right)
        else:
            product = Digital(asset="NORDA", right=right, strike=strike, expiry=expiry)
            ref = cf.digital_greeks(s0, strike, t, r, q, vol, right)

            def f(s, v, rr, tt, right=right, strike=strike):
                return cf.digital_price(s, strike, tt, rr, q, v, right)
        g = greeks(product, m, paths=65536, seed=41, cross_gamma=False)
        h, dt = SPOT_BUMP * s0, 1 / 365
        fd = {"delta": (f(s0 + h, vol, r, t) - f(s0 - h, vol, r, t)) / (2 * h),
              "gamma": (f(s0 + h, vol, r, t) - 2 * f(s0, vol, r, t) + f(s0 - h, vol, r, t)) / h**2,
              "vega": (f(s0, vol + VOL_BUMP, r, t) - f(s0, vol - VOL_BUMP, r, t)) / (2 * VOL_BUMP),
              "rho": (f(s0, vol, r + RATE_BUMP, t) - f(s0, vol, r - RATE_BUMP, t))
              / (2 * RATE_BUMP),
              "theta": (f(s0, vol, r, t - dt) - f(s0, vol, r, t + dt)) / (2 * dt)}
        names = ["delta", "gamma", "vega", "rho"] + (["theta"] if kind == "european" else [])
        for name in names:
            est = g.rho if name == "rho" else g.theta if name == "theta" else \
                getattr(g, name)["NORDA"]
            exact = est.method.startswith(("pathwise", "likelihood"))
            bias = 0.0 if exact else abs(fd[name] - ref[name])
            z = (est.value - ref[name]) / est.stderr if est.stderr > 0 else 0.0
            out.append(CaseResult(f"{kind} {right} K={strike:g} {name}", g.sampler, est.value,
                                  float(ref[name]), est.stderr, z,
                                  bias / abs(ref[name]) if ref[name] else 0.0))
    return out


def run(cases: list[Case] | None = None) -> list[CaseResult]:
    """Price every case and compare it with its closed form."""
    out = []
    for c in cases or default_cases():
        r = price(c.product, c.market, paths=c.paths, sampler=c.sampler, seed=c.seed,
                  antithetic=c.antithetic, control=c.control)
        ref = c.reference if c.reference is not None else c.product.closed_form(c.market)
        z = (r.price - ref) / r.stderr if r.stderr > 0 else (0.0 if r.price == ref else
                                                              float("inf"))
        out.append(CaseResult(c.name, c.sampler, r.price, ref, r.stderr, z, c.allowance))
    return out


def table(results: list[CaseResult]) -> str:
    head = f"{'case':<48} {'sampler':<7} {'Monte Carlo':>12} {'closed form':>12} " \
           f"{'stderr':>10} {'z':>7}  ok"
    lines = [head, "-" * len(head)]
    for r in results:
        lines.append(f"{r.name:<48} {r.sampler:<7} {r.monte_carlo:>12.6f} {r.closed_form:>12.6f} "
                     f"{r.stderr:>10.6f} {r.z:>7.2f}  {'yes' if r.ok else 'NO'}")
    n_bad = sum(not r.ok for r in results)
    lines.append(f"{len(results) - n_bad} of {len(results)} cases within |z| <= {Z_LIMIT:g} "
                 "(plus the exact bias of the central difference for bumped Greeks, and 0.3 "
                 "vol points for local volatility repricing its surface)")
    return "\n".join(lines)
