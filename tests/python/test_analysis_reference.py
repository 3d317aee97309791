"""fieldcage's analysis checked against independent general-purpose libraries.

The real Rust functions are called through the test kit's `fieldcage-probe`
command (one JSON request on stdin, the answer on stdout; crates/testkit/src/probe.rs)
and compared on random data with:
- scipy.stats.entropy and numpy for Shannon, Pielou, Simpson and Hill numbers
  (Hill 1973; Jost 2006), tolerance 1e-9;
- scipy.stats (t distribution, sem) for treatment summaries and t-based 95 % intervals;
- lifelines' KaplanMeierFitter for Kaplan-Meier survival (Kaplan & Meier 1958)
  with staggered entry, Greenwood's variance and the log-log interval.
Random data are seeded, so a failure can be reproduced.
"""

import json
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest
from lifelines import KaplanMeierFitter
from scipy import stats

ROOT = Path(__file__).resolve().parents[2]
PROBE = Path(os.environ.get("FIELDCAGE_PROBE", ROOT / "target" / "debug" / "fieldcage-probe"))
TOL = 1e-9


def probe(request: dict) -> dict:
    out = subprocess.run(
        [PROBE], input=json.dumps(request), capture_output=True, text=True, check=True
    )
    return json.loads(out.stdout)


def close(a, b, tol=TOL):
    """Equal within tol, absolute for small values and relative for large ones."""
    assert a is not None and b is not None, (a, b)
    assert abs(a - b) <= tol * max(1.0, abs(b)), (a, b)


def random_communities(rng, n=250):
    """Cover values as crews enter them: skewed, some zeros, some rounded."""
    out = [[40.0], [25.0, 25.0, 25.0, 25.0], [99.0, 0.5, 0.5], [50.0, 30.0, 20.0, 0.0]]
    while len(out) < n:
        s = int(rng.integers(1, 41))
        cover = rng.gamma(0.7, 10.0, size=s)
        cover[rng.random(s) < 0.2] = 0.0
        if rng.random() < 0.5:
            cover = np.round(cover * 2) / 2
        if cover.sum() > 0:
            out.append([float(c) for c in cover])
    return out


def test_diversity_matches_scipy_and_numpy():
    rng = np.random.default_rng(20261201)
    communities = random_communities(rng)
    assert len(communities) >= 200
    results = probe({"op": "diversity", "communities": communities})["results"]
    assert len(results) == len(communities)
    for cover, r in zip(communities, results):
        c = np.asarray(cover)
        p = c[c > 0] / c.sum()
        s = len(p)
        h = stats.entropy(p)  # natural log by default
        d = float(np.sum(p**2))
        assert r["richness"] == s == np.count_nonzero(c)
        close(r["total_cover_pct"], float(c.sum()))
        close(r["shannon"], h)
        if s == 1:
            assert r["pielou"] is None  # NA for one species, never 0 or NaN
        else:
            close(r["pielou"], h / np.log(s))
        close(r["simpson"], d)
        close(r["gini_simpson"], 1 - d)
        close(r["inverse_simpson"], 1 / d)
        close(r["hill_0"], float(s))
        close(r["hill_1"], float(np.exp(h)))
        close(r["hill_2"], 1 / d)


def test_hill_numbers_of_any_order_match_numpy():
    rng = np.random.default_rng(7)
    communities = random_communities(rng, n=200)
    orders = [0.0, 0.25, 0.5, 1.0, 1.5, 2.0, 3.0, 5.0]
    results = probe({"op": "hill", "communities": communities, "orders": orders})["results"]
    for cover, row in zip(communities, results):
        c = np.asarray(cover)
        p = c[c > 0] / c.sum()
        for q, value in zip(orders, row):
            if q == 1.0:
                expected = float(np.exp(stats.entropy(p)))
            else:
                expected = float(np.sum(p**q) ** (1 / (1 - q)))
            close(value, expected)


def test_t_intervals_match_scipy():
    rng = np.random.default_rng(31)
    samples = []
    for _ in range(200):
        n = int(rng.integers(2, 41))
        samples.append([float(x) for x in rng.normal(rng.uniform(0, 100), rng.uniform(0.1, 30), size=n)])
    results = probe({"op": "summary", "samples": samples})["results"]
    for x, r in zip(samples, results):
        a = np.asarray(x)
        low, high = stats.t.interval(0.95, df=len(a) - 1, loc=a.mean(), scale=stats.sem(a))
        assert r["n"] == len(a)
        close(r["mean"], float(a.mean()))
        close(r["sd"], float(a.std(ddof=1)))
        close(r["se"], float(stats.sem(a)))
        close(r["ci_low"], float(low))
        close(r["ci_high"], float(high))
    # One value: no spread and no interval; no values: no summary.
    one, none = probe({"op": "summary", "samples": [[4.5], []]})["results"]
    assert one["sd"] is None and one["ci_low"] is None and none is None


def random_survival(rng, staggered: bool):
    """Animals with whole-day exits (many ties), ~30 % censored, and with
    staggered entry some entering at half days (so no entry ties an exit)."""
    n = int(rng.integers(20, 150))
    exit_day = rng.integers(1, 31, size=n).astype(float)
    event = rng.random(n) < 0.7
    entry = np.zeros(n)
    if staggered:
        late = rng.random(n) < 0.3
        entry[late] = np.floor(rng.random(late.sum()) * exit_day[late]) + 0.5
        entry = np.minimum(entry, exit_day - 0.5)
    return entry, exit_day, event


@pytest.mark.parametrize("staggered", [False, True])
def test_kaplan_meier_and_greenwood_match_lifelines(staggered):
    rng = np.random.default_rng(11 if staggered else 5)
    for _ in range(25):
        entry, exit_day, event = random_survival(rng, staggered)
        spells = [
            {"entry": float(a), "exit": float(b), "count": 1, "event": bool(e)}
            for a, b, e in zip(entry, exit_day, event)
        ]
        steps = probe({"op": "kaplan_meier", "spells": spells})["steps"]
        kmf = KaplanMeierFitter().fit(exit_day, event, entry=entry if staggered else None)
        table = kmf.event_table
        checked = 0
        for s in steps:
            t = s["time"]
            assert s["at_risk"] == int(table.loc[t, "at_risk"] - (table.loc[t, "entrance"] if t > 0 else 0))
            assert s["events"] == int(table.loc[t, "observed"])
            close(s["survival"], float(kmf.survival_function_.loc[t].iloc[0]))
            if s["survival"] == 0 or s["variance"] is None:
                continue
            greenwood_sum = float(kmf._cumulative_sq_.loc[t])  # lifelines' Greenwood sum (no public accessor)
            close(s["se"], s["survival"] * np.sqrt(greenwood_sum))
            if 0 < s["survival"] < 1 and greenwood_sum > 0:
                low, high = kmf.confidence_interval_survival_function_.loc[t]
                close(s["ci_low"], float(low))
                close(s["ci_high"], float(high))
                checked += 1
        assert checked > 0
