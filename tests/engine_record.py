"""The record of demo prices and Greeks that a change of the engine's structure must keep.

Every example product in ``payoffs/`` is priced on each of the three demo markets at a fixed
seed, and its Greeks computed by bumps and by the default method (three of them also on the
smile market under the Heston and local-stochastic-vol models); ``tests/data/engine_record.json``
holds the numbers as they were before a refactor, and ``tests/test_engine_record.py`` compares.

Regenerate (only with a change meant to move numbers, saying by how much in the commit)::

    .venv/bin/python tests/engine_record.py --write
    .venv/bin/python tests/engine_record.py --check     # bit-for-bit comparison, one line a case
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
RECORD = ROOT / "tests" / "data" / "engine_record.json"
MARKETS = ("demo.toml", "demo_laws.toml", "demo_smile.toml")
PRICE_PATHS = 4096
GREEK_PATHS = 1024
SEED = 11
#: what-if models on a demo market, for a few products (the model's own calibrations included)
WHAT_IF = (("demo_smile.toml", "heston"), ("demo_smile.toml", "lsv"))
WHAT_IF_PAYOFFS = ("autocall_worst_of", "barrier_down_out_call", "european_call")


#: the Greeks recorded (later kinds are checked against outside references elsewhere)
KINDS = ("delta", "gamma", "vega", "cross_gamma", "rho", "theta")


def _greeks_dict(g) -> dict:
    d = g.to_dict()
    return {"price": d["price"], "stderr": d["stderr"],
            "greeks": {k: ({a: [x["value"], x["stderr"]] for a, x in v.items()}
                           if "value" not in v else [v["value"], v["stderr"]])
                       for k, v in d["greeks"].items() if k in KINDS}}


def compute() -> dict:
    import fairpath as fp
    from fairpath.errors import InputError

    out: dict = {}
    runs = [(mk, None, fp.load_market(ROOT / "markets" / mk), None) for mk in MARKETS]
    runs += [(mk, model, fp.load_market(ROOT / "markets" / mk).with_model(model),
              WHAT_IF_PAYOFFS) for mk, model in WHAT_IF]
    for mk, model, market, only in runs:
        for pf in sorted((ROOT / "payoffs").glob("*.toml")):
            if only is not None and pf.stem not in only:
                continue
            key = f"{mk}:{pf.stem}" if model is None else f"{mk}+{model}:{pf.stem}"
            product = fp.load_product(pf)
            row: dict = {}
            try:
                r = fp.price(product, market, paths=PRICE_PATHS, seed=SEED)
                row["price"] = [r.price, r.stderr, list(r.controls)]
                row["pseudo"] = [fp.price(product, market, paths=PRICE_PATHS, seed=SEED,
                                          sampler="pseudo").price]
                row["bump"] = _greeks_dict(fp.greeks(product, market, paths=GREEK_PATHS,
                                                     seed=SEED, method="bump"))
                row["auto"] = _greeks_dict(fp.greeks(product, market, paths=GREEK_PATHS,
                                                     seed=SEED, method="auto"))
            except InputError as exc:
                row["error"] = str(exc)
            out[key] = row
    return out


def main(argv: list[str]) -> int:
    import warnings
    warnings.simplefilter("ignore")
    now = compute()
    if "--write" in argv:
        RECORD.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
        print(f"wrote {len(now)} cases to {RECORD}")
        return 0
    before = json.loads(RECORD.read_text())
    bad = 0
    for k in sorted(set(before) | set(now)):
        same = json.dumps(before.get(k), sort_keys=True) == json.dumps(now.get(k),
                                                                         sort_keys=True)
        bad += not same
        print(f"{'same' if same else 'DIFFERENT':<10} {k}")
    print(f"{len(now) - bad} of {len(now)} cases bit for bit the same")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
