"""The vectorized bootstrap against a plain loop that refits every resample with statsmodels.

Reference library: statsmodels (OLS, Logit). Same resample indices must give
the same numbers: the moment-sum shortcut is exact, not an approximation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from fieldslope.analysis.cells import prepare, split_cells
from fieldslope.analysis.design import Design
from fieldslope.analysis.resample import SeasonResampler, counts_from_indices

TRAITS = ("mass", "wing")


def small_season(seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for site, n in (("east", 40), ("west", 55)):
        z = rng.normal([20.0, 3.0], [4.0, 0.5], size=(n, 2))
        surv = (rng.random(n) < 1 / (1 + np.exp(-(z[:, 0] - 20) / 4))).astype(float)
        seeds = rng.poisson(3 + (z[:, 1] - 3) * 2).astype(float).clip(0)
        parts.append(pd.DataFrame({"id": [f"{site}{i}" for i in range(n)], "season": "s1", "site": site,
                                   "mass": z[:, 0], "wing": z[:, 1], "surv": surv, "seeds": seeds}))
    return pd.concat(parts, ignore_index=True)


def sm_estimates(cells: list[pd.DataFrame], fitness: str) -> dict[str, np.ndarray]:
    """Relativize and standardize within each cell, stack, refit with statsmodels."""
    xs, ws, Ws = [], [], []
    for d in cells:
        z = d[list(TRAITS)].to_numpy()
        xs.append((z - z.mean(axis=0)) / z.std(axis=0, ddof=1))
        W = d[fitness].to_numpy()
        ws.append(W / W.mean())
        Ws.append(W)
    x, w, W = np.vstack(xs), np.concatenate(ws), np.concatenate(Ws)
    lin = sm.OLS(w, sm.add_constant(x)).fit()
    quad_X = np.column_stack([x, 0.5 * x[:, 0] ** 2, x[:, 0] * x[:, 1], 0.5 * x[:, 1] ** 2])
    quad = sm.OLS(w, sm.add_constant(quad_X)).fit()
    out = {"gradient": lin.params[1:], "quadratic": quad.params[3:], "opportunity": np.var(w)}
    # gradient_raw = beta / sd, sd pooled within cells (ddof 1)
    dof = sum(len(d) - 1 for d in cells)
    sd = np.sqrt(sum((len(d) - 1) * d[list(TRAITS)].var(ddof=1).to_numpy() for d in cells) / dof)
    out["gradient_raw"] = lin.params[1:] / sd
    out["differential_std"] = (w[:, None] * x).mean(axis=0) - x.mean(axis=0)
    g = quad.params[3:]
    out["canonical"] = np.linalg.eigvalsh(np.array([[g[0], g[1]], [g[1], g[2]]]))[::-1]
    # differential: mean(w z) - mean(z) with raw z
    z = np.vstack([d[list(TRAITS)].to_numpy() for d in cells])
    out["differential"] = (w[:, None] * z).mean(axis=0) - z.mean(axis=0)
    if fitness == "surv":
        lg = sm.Logit(W, sm.add_constant(x)).fit(disp=0, tol=1e-12, maxiter=100)
        p = lg.predict()
        out["gradient_logistic"] = lg.params[1:] * np.mean(p * (1 - p)) / W.mean()
    return out


@pytest.mark.parametrize("fitness", ["surv", "seeds"])
def test_vectorized_bootstrap_equals_statsmodels_loop(fitness):
    frame = small_season()
    design = Design(traits=TRAITS, fitness={"surv": "binary", "seeds": "count"})
    cells = split_cells(frame, design, ["surv", "seeds"])["s1"]
    preps = {f: [prepare(c, f, design.fitness[f], TRAITS) for c in cells] for f in ("surv", "seeds")}
    logistic = {("east", "surv"), ("west", "surv"), ("all", "surv")}
    rs = SeasonResampler(preps, TRAITS, pooled=True, logistic_blocks=logistic)
    rng = np.random.default_rng(11)
    B = 12
    idx = [rng.integers(0, len(c.z), size=(B, len(c.z))) for c in cells]
    reps = rs.boot_chunk([counts_from_indices(i, len(c.z)) for i, c in zip(idx, cells)])
    by_site = {"east": frame[frame.site == "east"].reset_index(drop=True),
               "west": frame[frame.site == "west"].reset_index(drop=True)}
    for b in range(B):
        resampled = {s: by_site[s].iloc[idx[k][b]] for k, s in enumerate(("east", "west"))}
        for site, block in (("east", [resampled["east"]]), ("west", [resampled["west"]]),
                            ("all", list(resampled.values()))):
            ref = sm_estimates(block, fitness)
            for j, t in enumerate(TRAITS):
                assert reps[(site, fitness, "gradient", t)][b] == pytest.approx(ref["gradient"][j], rel=1e-8, abs=1e-12)
                assert reps[(site, fitness, "differential", t)][b] == pytest.approx(ref["differential"][j], rel=1e-8, abs=1e-12)
                assert reps[(site, fitness, "differential_std", t)][b] == pytest.approx(
                    ref["differential_std"][j], rel=1e-8, abs=1e-12)
                assert reps[(site, fitness, "gradient_raw", t)][b] == pytest.approx(ref["gradient_raw"][j], rel=1e-8, abs=1e-12)
                assert reps[(site, fitness, "canonical", f"m{j + 1}")][b] == pytest.approx(ref["canonical"][j], rel=1e-7, abs=1e-10)
                if fitness == "surv":
                    assert reps[(site, fitness, "gradient_logistic", t)][b] == pytest.approx(
                        ref["gradient_logistic"][j], rel=1e-7)
            for k, term in enumerate(("mass^2", "mass:wing", "wing^2")):
                q = "correlational" if ":" in term else "quadratic"
                assert reps[(site, fitness, q, term)][b] == pytest.approx(ref["quadratic"][k], rel=1e-7, abs=1e-10)
            assert reps[(site, fitness, "opportunity", "")][b] == pytest.approx(ref["opportunity"], rel=1e-10)


def test_permutation_statistics_equal_statsmodels_refits_of_permuted_residuals():
    """Freedman & Lane (1983, J. Bus. Econ. Stat. 1:292-298): for each coefficient, the reduced model's
    residuals permuted within cells and added back to its fitted values, then the full model refitted with
    statsmodels OLS, give exactly the permutation statistic; for the canonical eigenvalues the reduced
    model is the linear one. Differentials are shuffled-fitness differentials (plain permutation)."""
    from fieldslope.analysis.permute import SeasonPermuter

    frame = small_season(7)
    design = Design(traits=TRAITS, fitness={"surv": "binary", "seeds": "count"})
    cells = split_cells(frame, design, ["seeds"])["s1"]
    preps = {"seeds": [prepare(c, "seeds", "count", TRAITS) for c in cells]}
    perm = SeasonPermuter(preps, TRAITS, pooled=True)
    rng = np.random.default_rng(3)
    P = 5
    orders = {key: np.array([rng.permutation(len(d.X)) for _ in range(P)]) for key, d in perm.designs.items()}
    stats_ = perm.statistics(orders, None)
    keys = list(perm.designs)  # one per cell (every individual is a complete case)
    by_site = [frame[frame.site == s].reset_index(drop=True) for s in ("east", "west")]
    terms = [("gradient", "mass"), ("gradient", "wing"), ("quadratic", "mass^2"), ("correlational", "mass:wing"),
             ("quadratic", "wing^2")]
    for site, cs in (("east", [0]), ("west", [1]), ("all", [0, 1])):
        parts = []
        for c in cs:
            z = by_site[c][list(TRAITS)].to_numpy()
            x = (z - z.mean(axis=0)) / z.std(axis=0, ddof=1)
            W = by_site[c]["seeds"].to_numpy()
            parts.append((np.column_stack([np.ones(len(x)), x, 0.5 * x[:, 0] ** 2, x[:, 0] * x[:, 1], 0.5 * x[:, 1] ** 2]),
                          W / W.mean(), z))
        X, w = np.vstack([q[0] for q in parts]), np.concatenate([q[1] for q in parts])
        ends = np.cumsum([0] + [len(q[1]) for q in parts])

        def permuted(e, b):  # the statistic's row order[i] meets residual i: residuals moved by the inverse
            return np.concatenate([e[ends[i]:ends[i + 1]][np.argsort(orders[keys[c]][b])] for i, c in enumerate(cs)])

        for t, (q, term) in enumerate(terms):
            width = 3 if q == "gradient" else 6
            keep = [k for k in range(width) if k != 1 + t]
            reduced = sm.OLS(w, X[:, keep]).fit()
            for b in range(P):
                ref = sm.OLS(reduced.fittedvalues + permuted(reduced.resid, b), X[:, :width]).fit().params[1 + t]
                assert stats_[(site, "seeds", q, term)][b] == pytest.approx(ref, rel=1e-8, abs=1e-12)
        linear = sm.OLS(w, X[:, :3]).fit()
        for b in range(P):
            g = sm.OLS(linear.fittedvalues + permuted(linear.resid, b), X).fit().params[3:]
            ev = np.linalg.eigvalsh(np.array([[g[0], g[1]], [g[1], g[2]]]))[::-1]
            for i in range(2):
                assert stats_[(site, "seeds", "canonical", f"m{i + 1}")][b] == pytest.approx(ev[i], rel=1e-8, abs=1e-12)
            # differential: mean(w* z) - mean(z) with fitness shuffled within cells (the same rows' order)
            z = np.vstack([q[2] for q in parts])
            w_star = permuted(w, b)
            S = (w_star[:, None] * z).mean(axis=0) - z.mean(axis=0)
            for j, name in enumerate(TRAITS):
                assert stats_[(site, "seeds", "differential", name)][b] == pytest.approx(S[j], rel=1e-8, abs=1e-12)
    # the statistics of the identity are the point estimates
    from fieldslope.analysis.table import estimate_table

    table = estimate_table(frame, design, bootstrap=0, fitness=["seeds"]).table
    observed = perm.observed()
    for _, r in table[table.quantity.isin(["gradient", "differential", "correlational", "canonical"])].iterrows():
        assert observed[(r.site, r.fitness, r.quantity, r.term)] == pytest.approx(r.estimate, rel=1e-9)


@pytest.mark.parametrize("W", [[0.0, 0.0, 1.0, 2.0], [1.0, 0.0, 1.0, 0.0, 0.0], [3.0, 1.0, 4.0, 1.5]])
def test_rank_key_shuffle_is_a_uniform_permutation(W):
    """Every distinct arrangement of W is equally likely: multinomial count n!/(k1!...km!) arrangements
    (common practice), checked with scipy's chi-square goodness-of-fit test; each row keeps W's values."""
    from math import factorial

    from scipy import stats

    from fieldslope.analysis.permute import shuffled

    W = np.array(W)
    draws = shuffled(np.random.default_rng(8), W, 60_000)
    assert np.array_equal(np.sort(draws, axis=1), np.broadcast_to(np.sort(W), draws.shape))
    _, counts = np.unique(draws, axis=0, return_counts=True)
    _, mult = np.unique(W, return_counts=True)
    arrangements = factorial(len(W)) // int(np.prod([factorial(int(m)) for m in mult]))
    assert len(counts) == arrangements
    assert stats.chisquare(counts).pvalue > 1e-3


def test_resamples_with_separated_survival_have_no_logistic_gradient():
    """A resample whose survivors and dead are split by the trait has no finite logistic estimate
    (complete separation: the maximum-likelihood estimate does not exist; Albert & Anderson 1984,
    Biometrika 71:1-10); every other resample equals a statsmodels Logit fit of the drawn individuals."""
    rng = np.random.default_rng(21)
    n = 24
    z = np.sort(rng.normal(10.0, 2.0, n))
    alive = (np.arange(n) >= n // 2).astype(float)
    alive[[n // 2 - 1, n // 2]] = alive[[n // 2, n // 2 - 1]]  # one overlapping pair: the full sample is not separated
    frame = pd.DataFrame({"id": [f"i{i}" for i in range(n)], "season": "s1", "site": "dune", "mass": z, "surv": alive})
    design = Design(traits=("mass",), fitness={"surv": "binary"})
    cells = split_cells(frame, design, ["surv"])["s1"]
    preps = {"surv": [prepare(c, "surv", "binary", ("mass",)) for c in cells]}
    rs = SeasonResampler(preps, ("mass",), pooled=False, logistic_blocks={("dune", "surv")})
    draws = rng.integers(0, n, size=(400, n))
    split = np.array([alive[d].min() < alive[d].max() and z[d][alive[d] == 0].max() < z[d][alive[d] == 1].min()
                      for d in draws])
    idx = np.vstack([draws[~split][:90], draws[split][:5]])  # a batch with a few separated resamples
    reps = rs.boot_chunk([counts_from_indices(idx, n)])[("dune", "surv", "gradient_logistic", "mass")]
    n_sep = 0
    for b in range(len(idx)):
        zb, wb = z[idx[b]], alive[idx[b]]
        if wb.min() == wb.max():
            continue  # no variation in survival: no estimate either way
        separated = zb[wb == 0].max() < zb[wb == 1].min()
        if separated:
            n_sep += 1
            assert np.isnan(reps[b])
        else:
            x = (zb - zb.mean()) / zb.std(ddof=1)
            fit = sm.Logit(wb, sm.add_constant(x)).fit(disp=0, tol=1e-12, maxiter=200)
            p = fit.predict()
            assert reps[b] == pytest.approx(fit.params[1] * np.mean(p * (1 - p)) / wb.mean(), rel=1e-6)
    assert n_sep == 5  # the check above really met separated resamples


def test_canonical_loading_intervals_from_sign_aligned_resamples_cover_the_true_axes():
    """Canonical axes are the eigenvectors of gamma (Phillips & Arnold 1989, Evolution 43:1209-1222); the
    estimate's are those of the gamma of an OLS quadratic fit by statsmodels, each signed with its largest
    loading positive (numpy.linalg.eigh). Over 200 simulated cells under a known quadratic fitness surface
    (gamma = [[-0.2, 0.1], [0.1, 0.05]], true axes its eigenvectors), the 95 % intervals of the loadings,
    taken over resamples whose eigenvectors are signed like the estimate's, cover the true loadings in at
    least 90 % of the cells; without the sign alignment they would straddle 0 (a reversed eigenvector)."""
    import statsmodels.api as sm
    from threadpoolctl import threadpool_limits

    from fieldslope.analysis.canonical_interval import loading_intervals
    from fieldslope.analysis.cells import prepare, split_cells
    from fieldslope.analysis.point import point_block
    from fieldslope.analysis.quadratic import oriented
    from fieldslope.analysis.resample import SeasonResampler, bootstrap_season

    rng = np.random.default_rng(12)
    k, n, B = 200, 300, 300
    G = np.array([[-0.2, 0.1], [0.1, 0.05]])
    true = oriented(np.linalg.eigh(G)[1][:, ::-1])
    x = rng.uniform(-np.sqrt(3), np.sqrt(3), (k, n, 2))
    W = 1 + 0.1 * x[..., 0] + 0.5 * np.einsum("kni,ij,knj->kn", x, G, x) + rng.uniform(-0.2, 0.2, (k, n))
    frame = pd.DataFrame({"id": np.arange(k * n).astype(str), "season": "s", "rep": np.repeat([f"r{i:03d}" for i in range(k)], n),
                          "a": x[..., 0].ravel(), "b": x[..., 1].ravel(), "w": W.ravel()})
    traits = ("a", "b")
    cells = split_cells(frame, Design(traits=traits, fitness={"w": "continuous"}, groups=("rep",)), ["w"])["s"]
    preps = {"w": [prepare(c, "w", "continuous", traits) for c in cells]}
    with threadpool_limits(limits=1, user_api="blas"):
        boot = bootstrap_season(SeasonResampler(preps, traits, False, set()), "s", B, 3, lambda k: None)
    hits = total = 0
    for c, pr in zip(cells, preps["w"]):
        rows = [dict(site=c.site, fitness="w", quantity=r.quantity, term=r.term, estimate=r.estimate, ci_low=np.nan, ci_high=np.nan)
                for r in point_block([pr], traits, "here").rows]
        if c.site == "r000":  # the estimate against statsmodels' OLS of the same quadratic model
            z = (c.z - c.z.mean(0)) / c.z.std(0, ddof=1)
            X = sm.add_constant(np.column_stack([z, 0.5 * z[:, 0] ** 2, z[:, 0] * z[:, 1], 0.5 * z[:, 1] ** 2]))
            g = sm.OLS(c.fitness["w"] / c.fitness["w"].mean(), X).fit().params[3:]
            ref = oriented(np.linalg.eigh(np.array([[g[0], g[1]], [g[1], g[2]]]))[1][:, ::-1])
            got = {r["term"]: r["estimate"] for r in rows if r["quantity"] == "canonical_loading"}
            np.testing.assert_allclose([[got[f"m{i + 1}:{t}"] for i in range(2)] for t in traits], ref, atol=1e-9)
        loading_intervals(rows, boot, traits)
        for r in rows:
            if r["quantity"] == "canonical_loading":
                i, t = int(r["term"][1]) - 1, traits.index(r["term"].split(":")[1])
                hits += r["ci_low"] <= true[t, i] <= r["ci_high"]
                total += 1
                assert r["ci_low"] > 0 or r["ci_high"] < 0 or abs(true[t, i]) < 0.5
    assert hits / total >= 0.90, hits / total


@pytest.mark.parametrize("slope", [0.0, 0.9, 2.2])
def test_batched_logistic_stops_within_its_stated_tolerance(slope):
    """Resamples fitted at once stop on a Newton step below STEP_TOL; every coefficient and logistic
    gradient is then within RESULT_TOL (relative to max(1, |value|)) of the maximum-likelihood fit of
    the drawn individuals by statsmodels Logit (reference library; Newton's method, tol 1e-13). Started
    from zero, so the stopping rule, not a close start, brings them there."""
    from fieldslope.analysis.logistic import RESULT_TOL, batched_logistic
    from fieldslope.analysis.point import with_intercept

    rng = np.random.default_rng(int(slope * 10) + 3)
    n, k, B = 160, 3, 60
    x = rng.normal(size=(n, k - 1))
    y = (rng.random(n) < 1 / (1 + np.exp(-(0.3 + x @ np.array([slope, -0.6 * slope]))))).astype(float)
    X = with_intercept(x)
    idx = rng.integers(0, n, size=(B, n))
    T = np.broadcast_to(np.eye(k), (B, k, k)).copy()
    beta, mean_pq, mean_w, ok = batched_logistic([(X, y, counts_from_indices(idx, n), T)], np.zeros((B, k)))
    assert ok.all()
    for b in range(B):
        fit = sm.Logit(y[idx[b]], X[idx[b]]).fit(disp=0, tol=1e-13, maxiter=200)
        p = fit.predict()
        grad = fit.params[1:] * np.mean(p * (1 - p)) / y[idx[b]].mean()
        assert np.max(np.abs(beta[b] - fit.params)) <= RESULT_TOL * max(1.0, np.max(np.abs(fit.params)))
        mine = beta[b, 1:] * mean_pq[b] / mean_w[b]
        assert np.max(np.abs(mine - grad)) <= RESULT_TOL * max(1.0, np.max(np.abs(grad)))


def test_moment_sums_worked_out_slab_by_slab_give_the_resamples_statsmodels_fits(monkeypatch):
    """Counts kept as bytes and multiplied a few individuals at a time (a tiny memory budget: blocks of
    two resamples, slabs of three rows) give the moment sums of one whole product, and every resample's
    gradients equal statsmodels OLS refits of the drawn individuals (the bootstrap as weighted moments,
    Efron & Tibshirani 1993, An Introduction to the Bootstrap)."""
    import fieldslope.analysis.resample as resample

    frame = small_season()
    design = Design(traits=TRAITS, fitness={"surv": "binary", "seeds": "count"})
    cells = split_cells(frame, design, ["surv", "seeds"])["s1"]
    preps = {f: [prepare(c, f, design.fitness[f], TRAITS) for c in cells] for f in ("surv", "seeds")}
    rs = SeasonResampler(preps, TRAITS, pooled=True, logistic_blocks={("east", "surv"), ("all", "surv")})
    idx = [np.random.default_rng(3).integers(0, len(c.z), size=(7, len(c.z))) for c in cells]
    counts = [counts_from_indices(i, len(c.z)) for i, c in zip(idx, cells)]
    monkeypatch.setattr(resample, "MEMORY_BUDGET", 8 * 7 * 3)
    sums = rs.stream_moments([c.astype(np.uint8) for c in counts])
    for M, C, F in zip(sums, counts, rs.features):
        assert np.allclose(M, C @ F.matrix(), rtol=1e-13, atol=1e-12)
    whole = rs.boot_chunk(counts)
    parts = [rs.boot_chunk([c[lo : lo + 2] for c in counts], [M[lo : lo + 2] for M in sums]) for lo in range(0, 7, 2)]
    key = ("all", "seeds", "gradient", "wing")
    got = np.concatenate([p[key] for p in parts])
    assert np.allclose(got, whole[key], rtol=1e-12)
    by_site = [frame[frame.site == s].reset_index(drop=True) for s in ("east", "west")]
    for b in range(7):
        ref = sm_estimates([d.iloc[i[b]] for d, i in zip(by_site, idx)], "seeds")
        assert got[b] == pytest.approx(ref["gradient"][1], rel=1e-8)
    logit = np.concatenate([p[("east", "surv", "gradient_logistic", "mass")] for p in parts])
    assert np.allclose(logit, whole[("east", "surv", "gradient_logistic", "mass")], rtol=1e-10)


def test_feature_slabs_have_exactly_the_numbers_of_the_whole_matrix():
    """Any slab of a cell's features, made from its recipes, equals those rows of the whole matrix bit for
    bit (elementwise arithmetic only), so the moment sums do not depend on the memory budget."""
    frame = small_season()
    design = Design(traits=TRAITS, fitness={"surv": "binary", "seeds": "count"})
    cells = split_cells(frame, design, ["surv", "seeds"])["s1"]
    preps = {f: [prepare(c, f, design.fitness[f], TRAITS) for c in cells] for f in ("surv", "seeds")}
    rs = SeasonResampler(preps, TRAITS, pooled=True, logistic_blocks={("west", "surv"), ("all", "surv")})
    for fm in rs.features:
        whole = fm.matrix()
        assert whole.shape == (fm.n_rows, fm.distinct) and fm.distinct < len(fm.columns)  # repeats kept once
        for lo, hi in ((0, 1), (3, 17), (17, fm.n_rows)):
            assert np.array_equal(fm.slab(lo, hi), whole[lo:hi])
