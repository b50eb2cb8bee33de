"""Product families. Importing this package registers every ``kind``."""

from fairpath.products.asian import Asian
from fairpath.products.autocall import Autocallable
from fairpath.products.barrier import Barrier
from fairpath.products.base import REGISTRY, ControlVariate, PathSet, Product, product_class
from fairpath.products.basket import Basket
from fairpath.products.exercise import American
from fairpath.products.formula import Formula
from fairpath.products.loader import load_product, product_from_dict
from fairpath.products.vanilla import Digital, European
from fairpath.registry import Capability, Shortcut, register_shortcut

# The likelihood-ratio (score) Greeks weight any payoff by the first step's score: every family
# has them where the model declares the score.
for _kind in REGISTRY:
    register_shortcut(_kind, Shortcut.LIKELIHOOD_RATIO, {Capability.SCORE})

__all__ = [
    "American", "Asian", "Autocallable", "Barrier", "Basket", "ControlVariate", "Digital",
    "European", "Formula", "PathSet", "Product", "REGISTRY", "load_product", "product_class",
    "product_from_dict",
]
