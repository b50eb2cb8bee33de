"""fairpath: Monte Carlo fair values, with error bars, for options and structured notes.

>>> import fairpath as fp
>>> market = fp.load_market("markets/demo.toml")            # doctest: +SKIP
>>> call = fp.load_product("payoffs/european_call.toml")     # doctest: +SKIP
>>> fp.price(call, market, paths=65536, sampler="sobol", seed=7)   # doctest: +SKIP
"""

from fairpath import plots  # noqa: E402,F401  (registers the drawing of results)
from fairpath.book import BookSummary, price_book
from fairpath.errors import FairpathError, FairpathWarning, InputError, SamplingWarning
from fairpath.estimate import CAUTION, PriceResult, price, price_many
from fairpath.greeks import GreekProfile, GreeksResult, greek_profile, greeks
from fairpath.laws import EmpiricalLaw, Law, NormalLaw, StudentT
from fairpath.market import Asset, Correlation, DiscountCurve, Market, VolCurve, load_market
from fairpath.models import Model, ModelSet
from fairpath.products import (
    REGISTRY,
    American,
    Asian,
    Autocallable,
    Barrier,
    Basket,
    Digital,
    European,
    Formula,
    Product,
    load_product,
)
from fairpath.quotes import QuoteCheck, QuoteChecks, check_quote, check_quotes
from fairpath.scenarios import ScenarioGrid, scenarios
from fairpath.solve import SolveResult, solve

__version__ = "0.1.0"

__all__ = [
    "American", "Asian", "Asset", "Autocallable", "Barrier", "Basket", "BookSummary", "CAUTION",
    "Correlation",
    "Digital", "DiscountCurve", "EmpiricalLaw", "European", "FairpathError", "FairpathWarning",
    "Formula", "GreekProfile", "GreeksResult", "InputError", "Law", "Market", "Model", "ModelSet",
    "NormalLaw",
    "PriceResult", "Product", "QuoteCheck", "QuoteChecks", "REGISTRY", "SamplingWarning",
    "ScenarioGrid", "SolveResult", "StudentT", "VolCurve", "check_quote", "check_quotes",
    "greek_profile", "greeks", "load_market", "load_product", "price", "price_book",
    "price_many", "scenarios", "solve",
]
