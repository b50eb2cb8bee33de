"""What the benchmark scripts share: the commit they ran at, and the law of a coverage study's
z-scores (``coverage.py`` for prices, ``coverage_greeks.py`` for Greeks).

Imported by each script before ``fairpath`` (and, in the coverage scripts, before they take this
folder off the import path so that ``coverage.py`` here never shadows the code-coverage package
numba looks for); it imports nothing that loads numba.
"""

from __future__ import annotations

import math
import subprocess
import time
from pathlib import Path

import numpy as np
from scipy import stats

HERE = Path(__file__).resolve().parent


def git_commit() -> str:
    """The repository's commit, marked when the fairpath imported is this checkout's ``src``
    with uncommitted changes, or named when it comes from elsewhere (an exported tree)."""
    import fairpath as fp

    src = HERE.parent / "src"
    here = Path(fp.__file__).resolve().parent.parent
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=HERE,
                              capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "../src"], cwd=HERE,
                               capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"
    if here != src.resolve():
        return f"{head} checkout; fairpath imported from {here}"
    return head + ("+uncommitted src changes" if dirty else "")


def z_stats(values: np.ndarray, stderrs: np.ndarray, covered: np.ndarray, ref: float,
            ref_se: float, law) -> dict:
    """Coverage and the law of ``z = (value - ref) / stderr`` over one case's runs, against
    what the interval's ``law`` claims. A run with a zero error bar counts as beyond 3 and 4
    unless its value is the reference. ``bias`` is the mean error over the runs' RMS stderr (a
    correlation between a run's error and its stderr does not move it, unlike the mean z); its
    stderr counts the reference's ``ref_se``."""
    n = len(values)
    zero = stderrs <= 0
    z = (values[~zero] - ref) / stderrs[~zero]
    off_zero = int(np.sum(values[zero] != ref))
    p3, p4 = 2 * law.sf(3.0), 2 * law.sf(4.0)
    beyond3 = int(np.sum(np.abs(z) > 3)) + off_zero
    beyond4 = int(np.sum(np.abs(z) > 4)) + off_zero
    cover = float(np.sum(covered)) / n
    rms = math.sqrt(float(np.mean(stderrs ** 2))) or float("nan")
    return {
        "seeds": n, "coverage": cover, "coverage_se": math.sqrt(0.95 * 0.05 / n),
        "coverage_se_measured": math.sqrt(cover * (1 - cover) / n),
        "beyond3": beyond3 / n, "beyond3_count": beyond3, "beyond4": beyond4 / n,
        "beyond4_count": beyond4, "claimed_beyond3": p3, "claimed_beyond4": p4,
        # the chance of at least this many runs beyond 4 if the interval's law held
        "p_beyond4": float(stats.binom.sf(beyond4 - 1, n, p4)) if beyond4 else 1.0,
        "max_abs_z": float(np.max(np.abs(z))) if len(z) else None,
        "mean_z": float(z.mean()) if len(z) else None,
        "mean_z_se": float(z.std(ddof=1) / math.sqrt(len(z))) if len(z) > 1 else None,
        "z_sd": float(z.std(ddof=1)) if len(z) > 1 else None,
        "claimed_z_sd": float(law.std()), "zero_stderr_runs": int(np.sum(zero)),
        "median_stderr": float(np.median(stderrs)),
        "bias": float((values.mean() - ref) / rms),
        "bias_se": float(math.sqrt(values.var(ddof=1) / n + ref_se ** 2) / rms),
    }


def pooled(rows: list[dict], claimed: dict) -> dict[str, dict]:
    """Per sampler (the keys of ``claimed``, each with its interval's law), the runs of every
    case together: is an excess in the tails a pattern?"""
    out = {}
    for sampler, law in claimed.items():
        these = [r["stats"] for r in rows if r["sampler"] == sampler]
        if not these:
            continue
        n = sum(s["seeds"] for s in these)
        p3, p4 = 2 * law.sf(3.0), 2 * law.sf(4.0)
        k3 = sum(s["beyond3_count"] for s in these)
        k4 = sum(s["beyond4_count"] for s in these)
        out[sampler] = {
            "cases": len(these), "runs": n,
            "coverage": sum(s["coverage"] * s["seeds"] for s in these) / n,
            "coverage_se": math.sqrt(0.95 * 0.05 / n), "beyond3": k3, "beyond4": k4,
            "claimed_beyond3": n * p3, "claimed_beyond4": n * p4,
            "p_beyond3": float(stats.binom.sf(k3 - 1, n, p3)) if k3 else 1.0,
            "p_beyond4": float(stats.binom.sf(k4 - 1, n, p4)) if k4 else 1.0,
            "max_abs_z": max((s["max_abs_z"] or 0.0) for s in these)}
    return out


def timed(fn) -> tuple[float, object]:
    """Seconds ``fn()`` takes, and what it returns."""
    t = time.perf_counter()
    out = fn()
    return time.perf_counter() - t, out
