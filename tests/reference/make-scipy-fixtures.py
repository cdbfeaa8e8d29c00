#!/usr/bin/python3
"""Reference values from scipy for the robust tests (and a few cross-checks) of Splitballot's stats/.

Writes tests/fixtures/scipy-reference.json. Run with Debian's interpreter and python3-scipy:

    /usr/bin/python3 tests/reference/make-scipy-fixtures.py            # datasets of tests/fixtures/r-reference.json
    /usr/bin/python3 tests/reference/make-scipy-fixtures.py --builtin  # only the small built-in list (for trying it out)

Datasets: every dataset of tests/fixtures/r-reference.json (same names, same a and b; the script
records n and the sums of a and b so that the tests can tell if r-reference.json changed since), plus
a few "script" datasets defined below with their data written inline (edge cases for the robust
tests: a constant group, complete separation, tiny groups, trimming boundaries). When
r-reference.json does not exist, or with --builtin, only the script datasets are written, and the
output says so in "datasetsFrom".

For each dataset and alternative ("two-sided", "less", "greater"):
  brunnerMunzel  = scipy.stats.brunnermunzel(a, b, alternative=..., distribution="t")
                   -> {statistic, df, p, pDirectTail}
                   df: scipy does not return it; this script computes it from the formula of Brunner &
                   Munzel (2000) (brunner_munzel_paper), and checks that the paper's statistic agrees with
                   scipy's (1e-11 relative) and that scipy's p is the t tail at that df (1e-9 relative).
                   pDirectTail: the same p computed by this script from scipy's statistic and df as a
                   direct tail (scipy.stats.t.cdf for P(T <= x), t.sf for P(T > x)), because the p of
                   brunnermunzel itself keeps only absolute precision (about 1e-16) for "less" and for
                   some "two-sided" cases (it returns 0 where the tail is 1e-253).
  yuenWelch      = scipy.stats.ttest_ind(a, b, equal_var=False, trim=0.2, alternative=...)
                   -> {t, df, p, difference}; difference = trim_mean(a, 0.2) - trim_mean(b, 0.2);
                   df: ttest_ind does not return it; computed here from Yuen (1974) (yuen_parts: g =
                   floor(0.2 n) cut from each end, Welch's df), and checked: scipy's p is the t tail at
                   scipy's t and that df (1e-9 relative).
  yuenWelchShifted (only for data far from 0 relative to their spread, e.g. near 1e12)
                 = the same call on a - c and b - c, c the pooled median, where every subtraction is
                   exact: t, df, p and the difference are unchanged by a common shift, and scipy's
                   plain sums of values near 1e12 lose digits that the shifted data keep.
  mannWhitneyAsymptotic = scipy.stats.mannwhitneyu(a, b, method="asymptotic", use_continuity=True,
                   alternative=...) -> {U1, p}
Per group: skewness = scipy.stats.skew(x), excessKurtosis = scipy.stats.kurtosis(x) (bias=True defaults).
Where scipy returns nan or inf, the value is null and the object carries a "reason".
"""
import datetime
import json
import math
import os
import platform
import re
import sys
import warnings

import numpy as np
import scipy
from scipy import special, stats
from scipy.stats import rankdata

HERE = os.path.dirname(os.path.abspath(__file__))
FIXTURES = os.path.join(HERE, "..", "fixtures")
R_REFERENCE = os.path.join(FIXTURES, "r-reference.json")
OUT = os.path.join(FIXTURES, "scipy-reference.json")
ALTERNATIVES = ["two-sided", "less", "greater"]
TRIM = 0.2


def finite_or_none(x):
    x = float(x)
    return x if math.isfinite(x) else None


def script_datasets():
    """Edge cases for the robust tests, with data inline (all invented; seeded)."""
    rng = np.random.RandomState(20240611)
    out = []

    def add(name, description, a, b):
        out.append({"name": name, "description": description,
                    "a": [float(v) for v in a], "b": [float(v) for v in b]})

    add("script-small-untied", "n = 5 and 7, no ties: g = 1 trimmed from each end in both groups",
        [2.1, 3.4, 1.9, 5.6, 4.4], [6.1, 3.3, 7.2, 5.9, 4.8, 8.8, 6.6])
    add("script-trim-boundaries", "n = 10 and 15 (0.2n exactly 2 and 3), Likert-type ties",
        [1, 2, 2, 3, 3, 3, 4, 4, 5, 5], [2, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 5, 4, 3])
    add("script-n4-n9", "n = 4 (g = 0 ... int(0.8) = 0) and n = 9 (g = 1)",
        [0.5, 1.5, -0.25, 2.0], [1.0, 3.5, 2.25, 4.0, 0.75, 5.5, 3.0, 2.5, 6.0])
    add("script-a-constant", "a is constant (its Brunner-Munzel and winsorized variances are 0), b varies and overlaps it",
        [3, 3, 3, 3, 3, 3], [1, 2, 3, 4, 5, 6, 7])
    add("script-b-constant-outside", "b constant and above every a: the placements of a are all 0, of b all n_a",
        [1.5, 2.5, 0.5, 2.0, 1.0], [4, 4, 4, 4])
    add("script-winsorized-constant-b", "b's winsorized values are constant although b is not (outliers trimmed)",
        [10.5, 11.25, 9.75, 12.0, 10.0, 11.0, 9.5], [5, 5, 5, 5, 5, 5, -40, 80, 5, 5])
    add("script-n2-groups", "n = 2 in each group (h = 2 after trimming, the smallest allowed)",
        [1.0, 2.5], [3.0, 3.75])
    add("script-heavy-ties-0-10", "0-10 item, 60 and 45 answers, many ties (seeded)",
        rng.randint(0, 11, 60), np.clip(rng.randint(0, 11, 45) + 2, 0, 10))
    add("script-unequal-spread", "normal means equal, sd 1 vs 6, n 30 vs 80 (seeded)",
        rng.normal(0, 1, 30), rng.normal(0, 6, 80))
    add("script-large-offset", "values near 1e12 with unit spread (seeded)",
        1e12 + np.round(rng.normal(0, 1, 25), 6), 1e12 + 0.5 + np.round(rng.normal(0, 1, 25), 6))
    add("script-far-apart-overlap", "strong shift with a little overlap: tiny p-values (seeded)",
        np.concatenate([rng.normal(0, 1, 200), [9.0]]), np.concatenate([rng.normal(8, 1, 200), [-1.0]]))
    return out


def placements(x, y):
    """Placement of each value of x among the observations of y: #(y < v) + 1/2 #(y = v)
    (Brunner & Munzel 2000: the overall mid-rank minus the mid-rank within the own group)."""
    ys = np.sort(np.asarray(y, dtype=float))
    below = np.searchsorted(ys, x, side="left")
    at_or_below = np.searchsorted(ys, x, side="right")
    return below + 0.5 * (at_or_below - below)


def brunner_munzel_paper(x, y):
    """The Brunner-Munzel statistic (sign as scipy's: positive when y tends to be larger) and df, written
    from Brunner & Munzel (2000): with P the placements, S2_i their sample variance in group i,
    W = (n_x n_y / 2 - sum P_x) / sqrt(n_x S2_x + n_y S2_y) and
    f = (n_x S2_x + n_y S2_y)^2 / ((n_x S2_x)^2 / (n_x - 1) + (n_y S2_y)^2 / (n_y - 1)).
    (nan, nan) where undefined (a group with fewer than 2 observations, or both variances 0)."""
    nx, ny = len(x), len(y)
    if nx < 2 or ny < 2:
        return float("nan"), float("nan")
    px = placements(x, y)
    py = placements(y, x)
    vx = nx * float(np.var(px, ddof=1))
    vy = ny * float(np.var(py, ddof=1))
    if vx + vy == 0.0:
        return float("nan"), float("nan")
    w = (nx * ny / 2.0 - float(np.sum(px))) / math.sqrt(vx + vy)
    f = (vx + vy) ** 2 / (vx ** 2 / (nx - 1) + vy ** 2 / (ny - 1))
    return w, f


def brunner_munzel(a, b, alternative):
    """scipy.stats.brunnermunzel (a black box: statistic and p) plus the df of its t approximation, which
    scipy does not return, from the paper's formula (brunner_munzel_paper). Two checks tie that df to
    scipy's run: the paper's statistic equals scipy's, and scipy's p equals the Student tail at scipy's
    statistic and this df (pDirectTail below) wherever that tail is large enough to be compared."""
    x = np.asarray(a, dtype=float)
    y = np.asarray(b, dtype=float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = stats.brunnermunzel(x, y, alternative=alternative, distribution="t")
    statistic = float(res.statistic)
    p = float(res.pvalue)
    own_statistic, df = brunner_munzel_paper(x, y)
    if math.isfinite(statistic) and math.isfinite(own_statistic):
        assert abs(own_statistic - statistic) <= 1e-11 * abs(statistic) + 1e-12, (own_statistic, statistic)
    out = {"statistic": finite_or_none(statistic), "df": finite_or_none(df), "p": finite_or_none(p)}
    if out["statistic"] is not None and out["df"] is not None:
        lower = float(stats.t.cdf(statistic, df))  # P(T <= statistic)
        upper = float(stats.t.sf(statistic, df))   # P(T > statistic)
        if alternative == "greater":
            direct = lower
        elif alternative == "less":
            direct = upper
        else:
            direct = min(1.0, 2.0 * min(lower, upper))
        out["pDirectTail"] = direct
        # scipy's p from this df: equal up to scipy's absolute precision there (1e-15)
        assert abs(direct - p) <= 1e-9 * direct + 1e-15, (alternative, statistic, df, p, direct)
    else:
        out["pDirectTail"] = None
    if None in (out["statistic"], out["df"], out["p"]):
        out["reason"] = ("scipy.stats.brunnermunzel returned statistic=%r, p=%r and the df formula gives %r "
                         "(a group with fewer than 2 observations, or both placement variances 0)"
                         % (statistic, p, df))
    return out


def yuen_parts(x):
    """Yuen (1974), for one group: g = floor(n / 5) values (the 20 % trim: TRIM = 0.2 = 1/5, so
    the floor is taken in whole numbers) are cut from each end, h = n - 2g remain, the winsorized sample
    sets the g lowest values to x_(g+1) and the g highest to x_(n-g), and d = SSD_w / (h (h - 1)) with
    SSD_w the sum of squared deviations of the winsorized sample from its mean. Returns (d, h); d is nan
    when h < 2."""
    assert TRIM == 0.2
    xs = np.sort(np.asarray(x, dtype=float))
    n = len(xs)
    g = n // 5
    h = n - 2 * g
    if h < 2:
        return float("nan"), h
    w = np.clip(xs, xs[g], xs[n - g - 1])
    ssd = float(np.sum((w - np.mean(w)) ** 2))
    return ssd / (h * (h - 1)), h


def yuen_welch(a, b, alternative):
    x = np.asarray(a, dtype=float)
    y = np.asarray(b, dtype=float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = stats.ttest_ind(x, y, equal_var=False, trim=TRIM, alternative=alternative)
        t = float(res.statistic)
        p = float(res.pvalue)
        df = float("nan")
        difference = float("nan")
        if len(x) > 0 and len(y) > 0:
            # df from Yuen (1974), which ttest_ind does not return (yuen_parts below); checked against scipy's p
            d1, h1 = yuen_parts(x)
            d2, h2 = yuen_parts(y)
            spread = d1 ** 2 / (h1 - 1) + d2 ** 2 / (h2 - 1)
            df = float((d1 + d2) ** 2 / spread) if spread > 0 else float("nan")
            difference = float(stats.trim_mean(x, TRIM) - stats.trim_mean(y, TRIM))
            if math.isfinite(t) and math.isfinite(df) and p > 1e-300:
                tail = float(stats.t.sf(abs(t), df))
                expected = {"two-sided": min(1.0, 2.0 * tail), "greater": float(stats.t.sf(t, df)),
                            "less": float(stats.t.cdf(t, df))}[alternative]
                assert abs(expected - p) <= 1e-9 * p, (alternative, t, df, p, expected)
    out = {"t": finite_or_none(t), "df": finite_or_none(df), "p": finite_or_none(p),
           "difference": finite_or_none(difference)}
    if None in (out["t"], out["df"], out["p"]):
        # scipy returns t = +-inf or nan here; the test is undefined then, so t, df and p are all null
        # (the trimmed-mean difference stays when it exists).
        out["t"] = out["df"] = out["p"] = None
        out["reason"] = ("scipy.stats.ttest_ind(trim=0.2) returned t=%r, p=%r with df %r "
                         "(fewer than 2 observations left after trimming, or both winsorized variances 0)"
                         % (t, p, df))
    return out


def exact_shift(a, b):
    """A shift c (the median of the pooled data) such that x - c is exact for every x, or None.

    Yuen's t, df, p and the trimmed-mean difference are unchanged by subtracting one constant from
    both groups; scipy's sums of values near 1e12 lose digits that the shifted data keep."""
    pooled = np.asarray(a + b, dtype=float)
    if len(pooled) == 0:
        return None
    c = float(np.median(pooled))
    spread = float(np.max(pooled) - np.min(pooled))
    if not (spread > 0.0 and abs(c) > 1e3 * spread):
        return None
    if all((x - c) + c == x for x in pooled):
        return c
    return None


def mann_whitney(a, b, alternative):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            res = stats.mannwhitneyu(a, b, method="asymptotic", use_continuity=True, alternative=alternative)
        except ValueError as e:
            return {"U1": None, "p": None, "reason": "scipy.stats.mannwhitneyu raised: %s" % e}
    out = {"U1": finite_or_none(res.statistic), "p": finite_or_none(res.pvalue)}
    if out["p"] is None or out["U1"] is None:
        out["reason"] = "scipy.stats.mannwhitneyu returned U1=%r, p=%r" % (float(res.statistic), float(res.pvalue))
    return out


def moment(fn, x, label):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        v = float(fn(np.asarray(x, dtype=float))) if len(x) > 0 else float("nan")
    if math.isfinite(v):
        return v, None
    return None, "scipy.stats.%s returned %r (fewer than 2 observations or a constant group)" % (label, v)


def one_dataset(ds, source):
    a = [float(v) for v in ds["a"]]
    b = [float(v) for v in ds["b"]]
    entry = {"name": ds["name"], "source": source}
    if source == "script":
        entry["description"] = ds["description"]
        entry["a"] = a
        entry["b"] = b
    entry["n"] = {"a": len(a), "b": len(b)}
    entry["sum"] = {"a": math.fsum(a), "b": math.fsum(b)}
    skew = {}
    kurt = {}
    for g, x in (("a", a), ("b", b)):
        skew[g], r1 = moment(stats.skew, x, "skew")
        kurt[g], r2 = moment(stats.kurtosis, x, "kurtosis")
        if r1:
            skew[g + "Reason"] = r1
        if r2:
            kurt[g + "Reason"] = r2
    entry["skewness"] = skew
    entry["excessKurtosis"] = kurt
    shift = exact_shift(a, b)
    entry["cases"] = [{
        "alternative": alt,
        "brunnerMunzel": brunner_munzel(a, b, alt),
        "yuenWelch": yuen_welch(a, b, alt),
        **({"yuenWelchShifted": dict(shift=shift, **yuen_welch([x - shift for x in a], [x - shift for x in b], alt))}
           if shift is not None else {}),
        "mannWhitneyAsymptotic": mann_whitney(a, b, alt),
    } for alt in ALTERNATIVES]
    return entry


def main():
    builtin_only = "--builtin" in sys.argv[1:]
    datasets = []
    if not builtin_only and os.path.exists(R_REFERENCE):
        with open(R_REFERENCE, encoding="utf-8") as f:
            ref = json.load(f)
        for ds in ref["datasets"]:
            datasets.append(one_dataset(ds, "r-reference.json"))
        datasets_from = "tests/fixtures/r-reference.json (generated %s) and the script's own datasets" % ref.get("generated")
    else:
        datasets_from = "the script's own datasets only (r-reference.json absent or --builtin)"
    for ds in script_datasets():
        datasets.append(one_dataset(ds, "script"))
    doc = {
        "note": "generated by tests/reference/make-scipy-fixtures.py — do not edit; regenerate with: "
                "/usr/bin/python3 tests/reference/make-scipy-fixtures.py",
        "tools": {"scipy": scipy.__version__, "numpy": np.__version__,
                  "python": platform.python_version()},
        "generated": datetime.date.today().isoformat(),
        "datasetsFrom": datasets_from,
        "datasets": datasets,
    }
    text = json.dumps(doc, indent=1, allow_nan=False, ensure_ascii=False)
    # keep number arrays (the inline data) on one line
    text = re.sub(r"\[\s*((?:-?[0-9.eE+-]+,\s*)*-?[0-9.eE+-]+)\s*\]",
                  lambda m: "[" + ", ".join(v.strip() for v in m.group(1).split(",")) + "]", text)
    with open(OUT, "w", encoding="utf-8") as f:
        f.write(text + "\n")
    print("wrote %s: %d datasets" % (os.path.relpath(OUT), len(datasets)))


if __name__ == "__main__":
    main()
