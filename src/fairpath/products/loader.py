"""Reading product files: ``kind`` picks the class from the registry, the rest are its keys."""

from __future__ import annotations

import warnings
from pathlib import Path

from fairpath.errors import FairpathWarning, InputError
from fairpath.inputs import MAX_AMOUNT, Table, one_line, read_toml, show
from fairpath.products.base import Product, product_class


def load_product(path: str | Path) -> Product:
    """Read and validate a product file.

    Examples
    --------
    >>> p = load_product("payoffs/european_call.toml")  # doctest: +SKIP
    """
    src = str(path)
    return product_from_dict(read_toml(path), source=src)


def product_from_dict(data: dict, *, source: str | None = None) -> Product:
    """Build a product from the contents of a product file (a dict)."""
    tab = Table(data, source)
    cls = product_class(tab.raw("kind"), source=source)
    cls = cls.for_terms(tab)
    kwargs = cls.from_table(tab)
    issuer = tab.string("issuer", None)
    funding = tab.boolean("funding", True)
    if issuer is not None and not issuer.strip():
        raise tab.error("issuer", "must not be empty")
    if not funding and issuer is None:
        raise tab.error("funding", "funding = false turns off an issuer's funding spread, and "
                        "the product names no issuer")
    if issuer is not None:
        kwargs |= {"issuer": issuer, "funding": funding}
    settlement = tab.string("settlement", None, choices=("quanto", "converted"))
    if tab.has("quanto_rate"):
        if settlement != "quanto":
            raise tab.error("quanto_rate", "a quanto rate applies to settlement = \"quanto\"")
        kwargs["quanto_rate"] = tab.number("quanto_rate", positive=True, limit=MAX_AMOUNT)
    if settlement is not None:
        kwargs["settlement"] = settlement
    tab.finish()
    try:
        product = cls(**kwargs, source=source)
    except InputError as exc:  # the terms' own checks: name the file (and keep to one line)
        key = exc.key if exc.key is None or exc.key.isprintable() else show(exc.key)
        raise InputError(one_line(exc.problem), source=source, key=key) from None
    for message in product.warnings():  # once per load, never on a later replace
        warnings.warn(message, FairpathWarning, stacklevel=3)
    return product
