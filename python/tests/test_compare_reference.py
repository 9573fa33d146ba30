"""`morbus compare --json` checked against reference libraries.

Runs the morbus command-line binary on the demo extract
(``demo-data/episodes.csv``; when that file is absent, on a seeded synthetic
extract of the same shape written by this test) and recomputes every figure
from the per-unit scores that ``morbus score`` writes for the same data:

* c-statistics: scikit-learn ``sklearn.metrics.roc_auc_score``;
* logistic coefficients, standard errors and AIC: statsmodels
  ``statsmodels.api.Logit`` (Newton, default options);
* DeLong variance and covariance of the c-statistics, and the test of their
  difference: an independent implementation below, written from the paper
  (E. R. DeLong, D. M. DeLong, D. L. Clarke-Pearson, "Comparing the areas
  under two or more correlated receiver operating characteristic curves: a
  nonparametric approach", Biometrics 1988;44:837-45), by the pairwise
  kernel psi over all (positive, negative) pairs;
* Spearman correlation: ``scipy.stats.spearmanr`` (scipy comes with
  statsmodels);
* score distributions: numpy (``mean``, ``std(ddof=1)``,
  ``percentile(method="linear")``);
* prevalence: the 0/1 condition flags of ``morbus score --flags``;
* providers (``--by site``): expected counts from statsmodels ``GLM``
  (binomial family) fitted probabilities; exact Poisson limits from
  ``scipy.stats.chi2.ppf`` (Garwood F. Biometrika 1936;28:437-42); funnel
  limits from ``scipy.stats.poisson`` with the interpolation of
  Spiegelhalter DJ. Stat Med 2005;24:1185-1202; over-dispersion
  (Spiegelhalter DJ. Qual Saf Health Care 2005;14:347-51) with numpy's
  percentiles; Spearman of the ratios with scipy;
* likelihood-ratio tests: statsmodels log-likelihoods and
  ``scipy.stats.chi2.sf``;
* restricted cubic splines (``--adjust-spline``): knots from numpy
  percentiles at Harrell's quantiles, the basis computed here from
  Durrleman & Simon (Stat Med 1989;8:551-61), the model from statsmodels
  ``GLM`` on it (coefficients, log-likelihood, fitted probabilities summed
  per provider);
* cluster-robust standard errors (``--cluster``): statsmodels ``GLM``
  ``fit(cov_type="cluster")`` with its default small-sample correction;
* cross-validation (``--folds``): per fold, statsmodels ``Logit`` on the
  other folds, scikit-learn ``roc_auc_score`` and ``brier_score_loss``;
  calibration slope and intercept with statsmodels (``Logit`` on the
  linear predictor; ``GLM`` with the linear predictor as offset).

The binary is ``$MORBUS_BIN``, else ``target/debug/morbus`` or
``target/release/morbus`` under the repository root (or under
``$CARGO_TARGET_DIR``).

Needs: pytest, numpy, pandas, scikit-learn, statsmodels.
"""

from __future__ import annotations

import io
import json
import os
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import norm, spearmanr
from sklearn.metrics import roc_auc_score

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo-data" / "episodes.csv"
OUTCOME = "died_within_30_days"
MISSING = {"", "NA", "N/A", "N/K", "NK", "NULL", "."}


def _binary() -> Path:
    env = os.environ.get("MORBUS_BIN")
    if env:
        return Path(env)
    candidates = []
    for base in filter(None, [os.environ.get("CARGO_TARGET_DIR"), str(ROOT / "target")]):
        candidates += [Path(base) / "debug" / "morbus", Path(base) / "release" / "morbus"]
    for c in candidates:
        if c.is_file():
            return c
    pytest.skip(
        "no morbus binary: build it (cargo build) or set MORBUS_BIN; looked in "
        + ", ".join(str(c) for c in candidates)
    )


def run(*args: str) -> subprocess.CompletedProcess:
    r = subprocess.run([str(_binary()), *args], capture_output=True, text=True)
    assert r.returncode == 0, f"morbus {' '.join(args)} failed ({r.returncode}):\n{r.stderr}"
    return r


def synthetic_extract(path: Path, n: int = 4000, seed: int = 20261201) -> None:
    """A seeded extract with the demo's columns; invented data throughout."""
    rng = np.random.default_rng(seed)
    codes = np.array(
        "I21.9 I50.0 E11.9 E11.2 C78.0 C18.7 J44.9 N18.5 F03 R29.6 W19 I10 E66.9 "
        "F32.9 K70.3 G30.9 I63.9 S72.0 N39.0 Z74.1 I48.9 M81.9 L89.1 E87.1 R41.8".split()
    )
    rows = []
    patients = rng.integers(0, n // 3, size=n)
    # Invented site names, drawn apart so the other columns keep their draws.
    sites = np.random.default_rng(seed + 1).choice(["Site A", "Site B", "Site C", "Site D"], size=n)
    for e in range(n):
        age = int(rng.integers(20, 100))
        k = min(20, int(rng.exponential(3.0)))
        dx = list(rng.choice(codes, size=min(k, len(codes)), replace=False))
        eta = -6.0 + 0.045 * age + 0.3 * len(dx) + (1.2 if "C78.0" in dx else 0.0)
        died = rng.random() < 1 / (1 + np.exp(-eta))
        outcome = "" if rng.random() < 0.02 else str(int(died))
        sex = "F" if rng.random() < 0.52 else "M"
        date = f"2025-{rng.integers(1, 13):02d}-{rng.integers(1, 29):02d}"
        rows.append(
            [f"E{e:06d}", f"P{patients[e]:05d}", sites[e], date, str(age), sex]
            + dx
            + [""] * (20 - len(dx))
            + [outcome]
        )
    cols = (
        ["episode_id", "patient_id", "site", "admission_date", "age", "sex"]
        + [f"dx{i}" for i in range(1, 21)]
        + [OUTCOME]
    )
    pd.DataFrame(rows, columns=cols).to_csv(path, index=False)


@pytest.fixture(scope="module")
def extract(tmp_path_factory) -> Path:
    if DEMO.is_file():
        return DEMO
    path = tmp_path_factory.mktemp("compare") / "synthetic.csv"
    print(f"{DEMO} not found: using a seeded synthetic extract")
    synthetic_extract(path)
    return path


LOOKBACKS = {
    "no-lookback": [],
    "lookback-365": ["--id", "patient_id", "--date", "admission_date", "--lookback", "365"],
}


@pytest.fixture(scope="module", params=list(LOOKBACKS))
def case(request, extract, tmp_path_factory):
    """The compare JSON and the per-unit scores and flags for one setting."""
    extra = LOOKBACKS[request.param]
    out = tmp_path_factory.mktemp("json") / "compare.json"
    base = [str(extract), "--dx", "dx*", *extra]
    run(
        "compare", *base, "--outcome", OUTCOME, "--adjust", "age",
        "--adjust-cat", "sex", "--json", str(out), "-q",
    )
    result = json.loads(out.read_text())
    specs = ",".join(ix["spec"] for ix in result["indices"])
    scored = run("score", *base, "--index", specs, "--flags", "-q").stdout
    df = pd.read_csv(io.StringIO(scored), dtype=str, keep_default_na=False)
    return result, df


def analysed(df: pd.DataFrame) -> pd.DataFrame:
    """The units compare analyses: outcome 0/1, age and sex present."""
    def present(col):
        return ~df[col].str.strip().str.upper().isin(MISSING)
    keep = present(OUTCOME) & present("age") & present("sex")
    return df[keep]


def test_units(case):
    result, df = case
    u = result["units"]
    a = analysed(df)
    assert u["read"] == len(df)
    assert u["analysed"] == len(a)
    assert u["events"] == int((a[OUTCOME] == "1").sum())
    assert u["missing_outcome"] == int(df[OUTCOME].str.strip().str.upper().isin(MISSING).sum())


def test_c_statistic_against_scikit_learn(case):
    """Reference: scikit-learn roc_auc_score."""
    result, df = case
    a = analysed(df)
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    checked = 0
    for ix in result["indices"]:
        s = a[ix["name"]].astype(float).to_numpy()
        if ix["c_statistic"] is None:
            assert np.ptp(s) == 0, ix["notes"]
            continue
        expected = roc_auc_score(y, s)
        assert ix["c_statistic"]["estimate"] == pytest.approx(expected, abs=1e-12), ix["name"]
        checked += 1
    assert checked >= 3


def test_logistic_against_statsmodels(case):
    """Reference: statsmodels Logit (maximum likelihood, Newton)."""
    result, df = case
    a = analysed(df)
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    ref_level = result["adjustment"][1]["reference"]
    assert result["adjustment"][1]["name"] == f"sex={sorted(a['sex'].unique())[1]}"
    assert ref_level == sorted(a["sex"].unique())[0]
    checked = 0
    for ix in result["indices"]:
        if ix["model"] is None:
            continue
        X = pd.DataFrame(
            {
                ix["name"]: a[ix["name"]].astype(float).to_numpy(),
                "age": a["age"].astype(float).to_numpy(),
            }
        )
        for level in sorted(a["sex"].unique())[1:]:
            X[f"sex={level}"] = (a["sex"] == level).astype(float).to_numpy()
        fit = sm.Logit(y, sm.add_constant(X)).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
        terms = ix["model"]["terms"]
        assert [t["name"] for t in terms] == ["(Intercept)", *X.columns]
        for t, b, se in zip(terms, fit.params, fit.bse):
            assert t["estimate"] == pytest.approx(b, rel=1e-6, abs=1e-9), (ix["name"], t["name"])
            assert t["std_error"] == pytest.approx(se, rel=1e-6), (ix["name"], t["name"])
        assert ix["model"]["aic"] == pytest.approx(fit.aic, rel=1e-9)
        assert ix["model"]["log_likelihood"] == pytest.approx(fit.llf, rel=1e-9)
        # c-statistic of the fitted linear predictor (scikit-learn).
        assert ix["model"]["c_statistic"] == pytest.approx(
            roc_auc_score(y, fit.fittedvalues), abs=1e-9
        )
        checked += 1
    assert checked >= 3


def delong_reference(scores: list[np.ndarray], y: np.ndarray):
    """DeLong, DeLong & Clarke-Pearson, Biometrics 1988;44:837-45, eqs. as
    written: psi(X, Y) = 1 if X > Y, 1/2 if equal, 0 if below; V10(X_i) =
    mean_j psi(X_i, Y_j); V01(Y_j) = mean_i psi(X_i, Y_j); S = S10/m + S01/n.
    Direct O(m n) pair kernel, in blocks of positives."""
    pos, neg = y == 1, y == 0
    m, n = pos.sum(), neg.sum()
    v10, v01, aucs = [], [], []
    for s in scores:
        x, yy = s[pos], s[neg]
        row = np.zeros(m)
        col = np.zeros(n)
        for start in range(0, m, 256):
            block = x[start:start + 256, None]
            psi = (block > yy[None, :]) + 0.5 * (block == yy[None, :])
            row[start:start + 256] = psi.mean(axis=1)
            col += psi.sum(axis=0)
        col /= m
        v10.append(row)
        v01.append(col)
        aucs.append(row.mean())
    v10, v01 = np.array(v10), np.array(v01)
    s10 = np.cov(v10, ddof=1) if len(scores) > 1 else np.array([[v10[0].var(ddof=1)]])
    s01 = np.cov(v01, ddof=1) if len(scores) > 1 else np.array([[v01[0].var(ddof=1)]])
    return np.array(aucs), s10 / m + s01 / n


def test_delong_against_independent_implementation(case):
    """Reference: DeLong, DeLong & Clarke-Pearson, Biometrics 1988;44:837-45
    (implemented above, independently of the Rust code)."""
    result, df = case
    a = analysed(df)
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    live = [ix for ix in result["indices"] if ix["c_statistic"] is not None]
    scores = [a[ix["name"]].astype(float).to_numpy() for ix in live]
    aucs, cov = delong_reference(scores, y)
    for k, ix in enumerate(live):
        c = ix["c_statistic"]
        assert c["estimate"] == pytest.approx(aucs[k], abs=1e-12)
        assert c["std_error"] ** 2 == pytest.approx(cov[k, k], rel=1e-9), ix["name"]
        half = norm.ppf(0.975) * np.sqrt(cov[k, k])
        assert c["ci95"][0] == pytest.approx(max(0.0, aucs[k] - half), abs=1e-9)
        assert c["ci95"][1] == pytest.approx(min(1.0, aucs[k] + half), abs=1e-9)
    names = [ix["name"] for ix in live]
    tested = 0
    for p in result["pairs"]:
        if p["delong"] is None:
            continue
        i, j = names.index(p["a"]), names.index(p["b"])
        var = cov[i, i] + cov[j, j] - 2 * cov[i, j]
        t = p["delong"]
        assert t["difference"] == pytest.approx(aucs[i] - aucs[j], abs=1e-12)
        assert t["std_error"] ** 2 == pytest.approx(var, rel=1e-7), (p["a"], p["b"])
        z = (aucs[i] - aucs[j]) / np.sqrt(var)
        assert t["z"] == pytest.approx(z, rel=1e-6, abs=1e-9)
        assert t["p_value"] == pytest.approx(2 * norm.sf(abs(z)), rel=1e-6, abs=1e-12)
        tested += 1
    assert tested >= 3


def test_spearman_against_scipy(case):
    """Reference: scipy.stats.spearmanr (average ranks for ties)."""
    result, df = case
    a = analysed(df)
    checked = 0
    for p in result["pairs"]:
        if p["spearman"] is None:
            continue
        rho = spearmanr(a[p["a"]].astype(float), a[p["b"]].astype(float)).statistic
        assert p["spearman"] == pytest.approx(rho, abs=1e-12), (p["a"], p["b"])
        checked += 1
    assert checked >= 3


def test_distribution_and_prevalence_against_numpy(case):
    """Reference: numpy mean, std(ddof=1), percentile(method='linear');
    prevalence from the `morbus score --flags` condition columns."""
    result, df = case
    a = analysed(df)
    for ix in result["indices"]:
        s = a[ix["name"]].astype(float).to_numpy()
        d = ix["distribution"]
        assert d["n"] == len(s)
        assert d["mean"] == pytest.approx(s.mean(), rel=1e-12, abs=1e-12)
        assert d["sd"] == pytest.approx(s.std(ddof=1), rel=1e-12, abs=1e-12)
        q = np.percentile(s, [0, 25, 50, 75, 100], method="linear")
        assert [d["min"], d["q1"], d["median"], d["q3"], d["max"]] == pytest.approx(list(q))
        assert d["zero_share"] == pytest.approx((s == 0).mean(), abs=1e-15)
        assert sum(b["count"] for b in ix["histogram"]) == len(s)
        for p in ix["prevalence"]:
            flags = a[f"{ix['list']}_{p['key']}"].astype(int)
            assert p["count"] == int(flags.sum()), (ix["name"], p["key"])
            assert p["share"] == pytest.approx(flags.mean(), abs=1e-15)



# ---------------------------------------------------------------------------
# Providers, likelihood-ratio tests and cross-validation.

from scipy.stats import chi2, poisson  # noqa: E402
from sklearn.metrics import brier_score_loss  # noqa: E402

# (provider column, adjusted for age, extra options). Ages as providers with
# no age term make the ratios over-dispersed, so the widened limits are
# checked too; the sites of the demo extract are not over-dispersed.
PROVIDER_RUNS = {
    "poisson": ("site", True, ["--min-expected", "5"]),
    "multiplicative": ("site", True, ["--min-expected", "5", "--overdispersion", "multiplicative"]),
    "additive": ("site", True, ["--min-expected", "5", "--overdispersion", "additive"]),
    "multiplicative-by-age": ("age", False, ["--min-expected", "2", "--overdispersion", "multiplicative"]),
    "additive-by-age": ("age", False, ["--min-expected", "2", "--overdispersion", "additive"]),
}


@pytest.fixture(scope="module", params=list(PROVIDER_RUNS))
def provider_case(request, extract, tmp_path_factory):
    out = tmp_path_factory.mktemp("providers") / "compare.json"
    base = [str(extract), "--dx", "dx*"]
    column, with_age, extra = PROVIDER_RUNS[request.param]
    run(
        "compare", *base, "--outcome", OUTCOME, *(["--adjust", "age"] if with_age else []),
        "--adjust-cat", "sex", "--by", column, "--folds", "5", "--id", "patient_id",
        *extra, "--json", str(out), "-q",
    )
    result = json.loads(out.read_text())
    specs = ",".join(ix["spec"] for ix in result["indices"])
    scored = run("score", *base, "--index", specs, "-q").stdout
    df = pd.read_csv(io.StringIO(scored), dtype=str, keep_default_na=False)
    def present(col):
        return ~df[col].str.strip().str.upper().isin(MISSING)
    keep = present(OUTCOME) & present("sex") & (present("age") if with_age else True)
    a = df[keep].reset_index(drop=True)
    mode = request.param.split("-")[0]
    return mode, result, a, column, with_age


def design(a: pd.DataFrame, name: str | None, with_age: bool = True) -> pd.DataFrame:
    X = pd.DataFrame(index=range(len(a)))
    if name is not None:
        X[name] = a[name].astype(float).to_numpy()
    if with_age:
        X["age"] = a["age"].astype(float).to_numpy()
    for level in sorted(a["sex"].unique())[1:]:
        X[f"sex={level}"] = (a["sex"] == level).astype(float).to_numpy()
    return sm.add_constant(X, has_constant="add")


def funnel_reference(e: float, p: float) -> float:
    """Spiegelhalter, Stat Med 2005;24:1185-1202: r the smallest integer with
    P(O <= r) >= p under Poisson(E) (scipy's ppf), a = (P(O <= r) - p) /
    (P(O <= r) - P(O <= r - 1)), limit (r - a)/E, not below 0."""
    r = poisson.ppf(p, e)
    hi, lo = poisson.cdf(r, e), poisson.cdf(r - 1, e)
    a = (hi - p) / (hi - lo)
    return max(0.0, (r - a) / e)


def test_providers_against_statsmodels_and_scipy(provider_case):
    """References: statsmodels GLM (binomial) fitted probabilities for E;
    scipy chi2.ppf for Garwood's exact limits; scipy poisson for the funnel
    limits; numpy percentiles for the Winsorised over-dispersion."""
    mode, result, a, column, with_age = provider_case
    prov = result["providers"]
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    sites = a[column].str.strip().to_numpy()
    has = ~np.isin(np.char.upper(sites.astype(str)), list(MISSING))
    assert prov["units_without_provider"] == int((~has).sum())
    names = sorted(set(sites[has]), key=lambda v: v.encode())
    assert prov["names"] == names
    for k, s in enumerate(names):
        assert prov["units"][k] == int((sites == s).sum())
        assert prov["observed"][k] == int(y[sites == s].sum())
    checked = 0
    for spec in prov["specifications"]:
        fit = sm.GLM(y, design(a, spec["index"], with_age), family=sm.families.Binomial()).fit(
            tol=1e-12
        )
        p = fit.fittedvalues if hasattr(fit.fittedvalues, "to_numpy") else fit.fittedvalues
        p = np.asarray(p)
        e = np.array([p[sites == s].sum() for s in names])
        o = np.array(prov["observed"], dtype=float)
        judged = e >= prov["min_expected"]
        # Over-dispersion: z = (O - E)/sqrt(E), Winsorised at the 10th and
        # 90th percentiles (numpy linear), phi = mean z^2.
        z = (o - e) / np.sqrt(e)
        zj = z[judged]
        lo, hi = np.percentile(zj, [10, 90], method="linear")
        phi = np.mean(np.clip(zj, lo, hi) ** 2)
        i = len(zj)
        w = e[judged]
        tau2 = max(0.0, (i * phi - (i - 1)) / (w.sum() - (w ** 2).sum() / w.sum()))
        if mode != "poisson":
            d = spec["dispersion"]
            assert d["phi"] == pytest.approx(phi, rel=1e-6)
            assert d["tau2"] == pytest.approx(tau2, rel=1e-6, abs=1e-12)
            assert d["p_value"] == pytest.approx(chi2.sf(i * phi, i - 1), rel=1e-6)
        for k, row in enumerate(spec["providers"]):
            assert row["expected"] == pytest.approx(e[k], rel=1e-6), (spec["index"], names[k])
            assert row["ratio"] == pytest.approx(o[k] / e[k], rel=1e-6)
            lo_ci = chi2.ppf(0.025, 2 * o[k]) / 2 if o[k] > 0 else 0.0
            hi_ci = chi2.ppf(0.975, 2 * o[k] + 2) / 2
            assert row["ci95"] == pytest.approx([lo_ci / e[k], hi_ci / e[k]], rel=1e-6)
            widened = mode != "poisson" and spec["dispersion"]["widened"]
            for key, (pl, pu) in (("limits95", (0.025, 0.975)), ("limits998", (0.001, 0.999))):
                if widened:
                    zq = norm.ppf(pu)
                    sd = np.sqrt(phi / e[k]) if mode == "multiplicative" else np.sqrt(1 / e[k] + tau2)
                    want = [max(0.0, 1 - zq * sd), 1 + zq * sd]
                    assert row[key] == pytest.approx(want, rel=1e-5, abs=1e-9)
                else:
                    want = [funnel_reference(e[k], pl), funnel_reference(e[k], pu)]
                    assert row[key] == pytest.approx(want, rel=1e-9, abs=1e-12)
                ratio = o[k] / e[k]
                pos = ("under" if ratio < want[0] else "over" if ratio > want[1] else "inside")
                position = row["position95" if key == "limits95" else "position998"]
                assert position == (pos if judged[k] else "not_judged"), (spec["index"], names[k])
            checked += 1
    assert checked >= 10
    if mode != "poisson" and column == "age":
        assert any(s["dispersion"]["widened"] for s in prov["specifications"]), "no widened case"
    # Agreement: Spearman of the ratios over providers judged under both (scipy).
    by_name = {s["index"]: s for s in prov["specifications"]}
    for ag in prov["agreement"]:
        ra, rb = by_name[ag["a"]]["providers"], by_name[ag["b"]]["providers"]
        both = [k for k in range(len(names))
                if ra[k]["position998"] != "not_judged" and rb[k]["position998"] != "not_judged"]
        assert ag["judged"] == len(both)
        assert ag["position_changes"] == sum(ra[k]["position998"] != rb[k]["position998"] for k in both)
        if len(both) >= 2:
            rho = spearmanr([ra[k]["ratio"] for k in both], [rb[k]["ratio"] for k in both]).statistic
            assert ag["spearman"] == pytest.approx(rho, abs=1e-12)


def test_likelihood_ratio_against_statsmodels(provider_case):
    """Reference: statsmodels Logit log-likelihoods; scipy chi2.sf (1 df)."""
    _, result, a, _, with_age = provider_case
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    base = sm.Logit(y, design(a, None, with_age)).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    for ix in result["indices"]:
        if ix["added_value"] is None:
            continue
        fit = sm.Logit(y, design(a, ix["name"], with_age)).fit(
            disp=0, method="newton", tol=1e-12, maxiter=100
        )
        lr = 2 * (fit.llf - base.llf)
        assert ix["added_value"]["statistic"] == pytest.approx(lr, rel=1e-6)
        assert ix["added_value"]["p_value"] == pytest.approx(chi2.sf(lr, 1), rel=1e-5, abs=1e-300)


def folds_reference(groups: list, k: int, seed: int) -> np.ndarray:
    """The fold assignment morbus documents: distinct --id values in order of
    first appearance among the analysed units, shuffled by Fisher-Yates with
    SplitMix64 (seeded), dealt round-robin."""
    mask = (1 << 64) - 1
    index: dict = {}
    group = [index.setdefault(g, len(index)) for g in groups]
    order = list(range(len(index)))
    state = seed

    def rand():
        nonlocal state
        state = (state + 0x9E3779B97F4A7C15) & mask
        z = state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & mask
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & mask
        return z ^ (z >> 31)

    for i in range(len(order) - 1, 0, -1):
        j = rand() % (i + 1)
        order[i], order[j] = order[j], order[i]
    fold_of_group = [0] * len(order)
    for pos, g in enumerate(order):
        fold_of_group[g] = pos % k
    return np.array([fold_of_group[g] for g in group])


def test_folds_against_scikit_learn_and_statsmodels(provider_case):
    """References: per fold, statsmodels Logit fitted on the other folds;
    scikit-learn roc_auc_score and brier_score_loss; calibration slope
    (statsmodels Logit of y on the linear predictor) and intercept
    (statsmodels GLM with the linear predictor as offset): Cox DR.
    Biometrika 1958;45:562-5."""
    mode, result, a, _, _ = provider_case
    if mode != "poisson":
        pytest.skip("the folds do not depend on --overdispersion; checked once")
    cv = result["cross_validation"]
    assert cv["grouped_by"] == "patient_id" and cv["folds"] == 5
    fold = folds_reference(list(a["patient_id"]), 5, cv["seed"])
    assert cv["fold_units"] == [int((fold == f).sum()) for f in range(5)]
    # A patient's episodes stay in one fold.
    assert (pd.Series(fold).groupby(a["patient_id"].to_numpy()).nunique() == 1).all()
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    checked = 0
    for ix in result["indices"]:
        oos = ix["out_of_sample"]
        if oos is None:
            continue
        X = design(a, ix["name"]).to_numpy()
        eta = np.zeros(len(y))
        for f in range(5):
            tr, te = fold != f, fold == f
            fit = sm.Logit(y[tr], X[tr]).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
            eta[te] = X[te] @ fit.params
            p_te = 1 / (1 + np.exp(-eta[te]))
            got = oos["folds"][f]
            assert got["units"] == int(te.sum())
            assert got["c_statistic"] == pytest.approx(roc_auc_score(y[te], eta[te]), abs=1e-9)
            assert got["brier"] == pytest.approx(brier_score_loss(y[te], p_te), rel=1e-6)
        p = 1 / (1 + np.exp(-eta))
        assert oos["c_statistic"] == pytest.approx(roc_auc_score(y, eta), abs=1e-9)
        assert oos["brier"] == pytest.approx(brier_score_loss(y, p), rel=1e-6)
        slope = sm.Logit(y, sm.add_constant(eta)).fit(disp=0, method="newton", tol=1e-12).params[1]
        assert oos["calibration_slope"] == pytest.approx(slope, rel=1e-5)
        intercept = sm.GLM(y, np.ones((len(y), 1)), family=sm.families.Binomial(),
                           offset=eta).fit(tol=1e-12).params[0]
        assert oos["calibration_intercept"] == pytest.approx(intercept, rel=1e-5, abs=1e-8)
        # Tenths of predicted risk: ten groups of n/10 units in order of p.
        order = np.argsort(eta, kind="stable")
        n = len(y)
        for g, grp in enumerate(oos["calibration"]):
            idx = order[g * n // 10:(g + 1) * n // 10]
            assert grp["units"] == len(idx)
            assert grp["mean_predicted"] == pytest.approx(p[idx].mean(), rel=1e-6)
        checked += 1
    assert checked >= 3


# Harrell FE. Regression Modeling Strategies, 2nd ed. 2015, section 2.4.6,
# Table 2.3 (from memory): knot quantiles for 3 to 7 knots.
HARRELL_QUANTILES = {
    3: [0.10, 0.50, 0.90],
    4: [0.05, 0.35, 0.65, 0.95],
    5: [0.05, 0.275, 0.50, 0.725, 0.95],
}


def rcs_basis(x: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Durrleman & Simon (Stat Med 1989;8:551-61) restricted cubic spline
    terms, normalised by (t_K - t_1)^2; written here independently."""
    k = len(t)
    def pos3(u):
        return np.where(u > 0, u, 0.0) ** 3
    out = []
    for j in range(k - 2):
        term = (
            pos3(x - t[j])
            - pos3(x - t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
            + pos3(x - t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2])
        )
        out.append(term / (t[k - 1] - t[0]) ** 2)
    return np.column_stack(out)


@pytest.mark.parametrize("knots", [3, 4, 5])
def test_spline_and_clusters_against_statsmodels(extract, tmp_path, knots):
    """References: numpy percentiles for the knots; statsmodels GLM on a
    basis computed in this test for the coefficients, log-likelihood and
    fitted probabilities (as expected counts per provider); statsmodels
    GLM cov_type='cluster' for the cluster-robust standard errors."""
    out = tmp_path / "c.json"
    run(
        "compare", str(extract), "--dx", "dx*", "--outcome", OUTCOME, "--adjust", "age",
        "--adjust-spline", f"age:{knots}", "--adjust-cat", "sex", "--by", "site",
        "--cluster", "patient_id", "--index", "charlson:quan2011,elixhauser:vanwalraven2009",
        "--json", str(out), "-q",
    )
    result = json.loads(out.read_text())
    specs = ",".join(ix["spec"] for ix in result["indices"])
    scored = run("score", str(extract), "--dx", "dx*", "--index", specs, "-q").stdout
    a = analysed(pd.read_csv(io.StringIO(scored), dtype=str, keep_default_na=False))
    a = a.reset_index(drop=True)
    age = a["age"].astype(float).to_numpy()
    y = (a[OUTCOME] == "1").astype(int).to_numpy()
    t = np.percentile(age, np.array(HARRELL_QUANTILES[knots]) * 100, method="linear")
    [sp] = result["splines"]
    assert sp["column"] == "age"
    assert sp["knots"] == pytest.approx(list(t), rel=1e-12)
    assert sp["terms"] == ["age"] + [f"age_spline{j}" for j in range(1, knots - 1)]
    basis = rcs_basis(age, t)
    groups = pd.factorize(a["patient_id"])[0]
    assert result["clusters"]["clusters"] == len(set(groups))
    sites = a["site"].str.strip().to_numpy()
    names = result["providers"]["names"]
    for ix in result["indices"]:
        X = pd.DataFrame({ix["name"]: a[ix["name"]].astype(float), "age": age})
        for j in range(knots - 2):
            X[f"age_spline{j + 1}"] = basis[:, j]
        for level in sorted(a["sex"].unique())[1:]:
            X[f"sex={level}"] = (a["sex"] == level).astype(float)
        X = sm.add_constant(X, has_constant="add")
        glm = sm.GLM(y, X, family=sm.families.Binomial())
        fit = glm.fit(tol=1e-12)
        terms = ix["model"]["terms"]
        assert [t_["name"] for t_ in terms] == ["(Intercept)"] + list(X.columns[1:])
        for t_, b, se in zip(terms, fit.params, fit.bse):
            assert t_["estimate"] == pytest.approx(b, rel=1e-6, abs=1e-9)
            assert t_["std_error"] == pytest.approx(se, rel=1e-6)
        assert ix["model"]["log_likelihood"] == pytest.approx(fit.llf, rel=1e-9)
        p = np.asarray(fit.fittedvalues)
        spec = next(s for s in result["providers"]["specifications"] if s["index"] == ix["name"])
        for k, s in enumerate(names):
            assert spec["providers"][k]["expected"] == pytest.approx(p[sites == s].sum(), rel=1e-6)
        robust = glm.fit(tol=1e-12, cov_type="cluster", cov_kwds={"groups": groups})
        for t_, se in zip(terms, robust.bse):
            assert t_["cluster_std_error"] == pytest.approx(se, rel=1e-6)
        # The clustered c-statistic interval is there and contains the estimate.
        c = ix["c_statistic"]
        assert c["cluster_ci95"][0] < c["estimate"] < c["cluster_ci95"][1]
