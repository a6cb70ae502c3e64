"""Generate the invented demo season, and the true values it was generated from.

The lantern scree beetle (*Skerrobius lanternae*) is an invented species; its
three sites and every number below are invented too. This script is the only
source of the demo's batch files:

    python demo_season/generate.py            # (re)write demo_season/batches/
    python demo_season/generate.py --out DIR  # write the batches elsewhere
    python demo_season/generate.py --truth    # true values from a very large sample

The batches are committed, so the demo needs no generation step; the tests
check that this script reproduces them.
"""

from __future__ import annotations

import argparse
import csv
import io
import re
import sys
import zipfile
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SEED = 51_2023
TRUTH_SEED = 7_2025
TRUTH_N = 2_100_000  # individuals per season for the true values (700,000 at each site)

# --- the invented population --------------------------------------------------------------
SITES = {"UR": "Upper Ridge", "BS": "Birch Saddle", "MS": "Mosskettle Scree"}
SEASONS = ("2023", "2024", "2025")
N_PER_CELL = 600          # beetles marked per site and season
PAIRS_PER_CELL = 100      # pairs from last season whose offspring are marked this season
SIRES_PER_CELL = 70       # males mated at the station: 30 of them with a second female
# one genuinely light beetle, UR25-0210 at 34.1 mg (4.2 sd below the mean): a season of this size
# draws such a beetle only now and then, so it is placed here; its value is right and it lives or dies by
# the same model as every other beetle
GENUINE_EXTREME = ("2025", "UR", 209, 2, 34.1)

TRAITS = ("elytron", "mandible", "mass")
MEAN = np.array([8.00, 1.40, 72.0])          # mm, mm, mg
SD = np.array([0.55, 0.12, 9.0])
DECIMALS = (2, 2, 1)
CORR = np.array([[1.00, 0.30, 0.55],          # phenotypic correlations
                 [0.30, 1.00, 0.25],
                 [0.55, 0.25, 1.00]])
H2 = np.array([0.55, 0.35, 0.30])              # narrow-sense heritabilities
GEN_CORR = np.array([[1.00, 0.45, 0.70],      # additive genetic correlations (not the phenotypic ones)
                     [0.45, 1.00, 0.05],
                     [0.70, 0.05, 1.00]])
P = CORR * np.outer(SD, SD)
_SD_A = np.sqrt(H2) * SD
G = GEN_CORR * np.outer(_SD_A, _SD_A)          # additive genetic (co)variances
E = P - G                                      # environmental part (positive definite)


@dataclass(frozen=True)
class SeasonModel:
    """Survival to the midsummer census: logit p = a_site + b·x + c·x_elytron·x_mandible.
    Brood of a survivor: Poisson with log mean = log(m_site) + d·x.
    x is the trait standardized with the population mean and sd."""

    survival_base: dict[str, float]
    b: tuple[float, float, float]
    c: float
    brood_base: dict[str, float]
    d: tuple[float, float, float]


MODEL = {
    "2023": SeasonModel({"UR": 0.35, "BS": 0.55, "MS": 0.15}, (0.35, 0.25, 0.20), 0.30,
                        {"UR": 7.0, "BS": 8.0, "MS": 6.5}, (0.10, 0.15, 0.05)),
    # a dry summer: heavy beetles die more often (the gradient on mass changes sign)
    "2024": SeasonModel({"UR": 0.20, "BS": 0.40, "MS": 0.00}, (0.30, 0.25, -0.35), 0.30,
                        {"UR": 6.0, "BS": 7.0, "MS": 5.5}, (0.10, 0.15, 0.05)),
    "2025": SeasonModel({"UR": 0.40, "BS": 0.60, "MS": 0.25}, (0.40, 0.20, 0.25), 0.30,
                        {"UR": 7.5, "BS": 8.5, "MS": 7.0}, (0.10, 0.15, 0.05)),
}


def draw_fitness(rng: np.random.Generator, z: np.ndarray, season: str, site: str):
    """Survival (0/1) and brood (count; NaN for beetles dead at the census)."""
    m = MODEL[season]
    x = (z - MEAN) / SD
    eta = m.survival_base[site] + x @ np.array(m.b) + m.c * x[:, 0] * x[:, 1]
    survived = (rng.random(len(z)) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    lam = m.brood_base[site] * np.exp(x @ np.array(m.d))
    brood = rng.poisson(lam).astype(float)
    brood[survived == 0] = np.nan
    return survived, brood


def draw_individuals(rng: np.random.Generator, n: int):
    """Breeding values and phenotypes of n unrelated beetles."""
    a = rng.multivariate_normal(np.zeros(3), G, size=n, method="cholesky")
    e = rng.multivariate_normal(np.zeros(3), E, size=n, method="cholesky")
    return a, MEAN + a + e


def draw_offspring(rng: np.random.Generator, a_dam: np.ndarray, a_sire: np.ndarray):
    """Infinitesimal model: midparent breeding value plus segregation (variance G/2) and environment."""
    n = len(a_dam)
    seg = rng.multivariate_normal(np.zeros(3), G / 2, size=n, method="cholesky")
    a = (a_dam + a_sire) / 2 + seg
    e = rng.multivariate_normal(np.zeros(3), E, size=n, method="cholesky")
    return a, MEAN + a + e


def mate(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Pairs mated at the station after the spring measurements: each beetle is sexed (half are female),
    PAIRS_PER_CELL females are taken at random as dams, SIRES_PER_CELL males as sires; every sire gets one
    dam and the remaining dams a second mate among those sires (so some families are paternal half-sibs).
    Returns the dam and sire of each pair, as indices into last season's beetles of the site."""
    female = rng.random(n) < 0.5
    dams = rng.choice(np.flatnonzero(female), PAIRS_PER_CELL, replace=False)
    males = rng.choice(np.flatnonzero(~female), SIRES_PER_CELL, replace=False)
    sires = np.concatenate([males, rng.choice(males, PAIRS_PER_CELL - SIRES_PER_CELL)])
    return dams, sires


# --- the demo season's records ------------------------------------------------------------
def simulate(rng: np.random.Generator) -> dict[tuple[str, str], dict]:
    """Every beetle of every cell: IDs, traits, parents, fitness (before any mistake)."""
    cells: dict[tuple[str, str], dict] = {}
    for si, season in enumerate(SEASONS):
        for code in SITES:
            n = N_PER_CELL
            a, z = draw_individuals(rng, n)
            dam = np.full(n, "", dtype=object)
            sire = np.full(n, "", dtype=object)
            if si > 0:
                prev = cells[(SEASONS[si - 1], code)]
                dams, sires = mate(rng, len(prev["ids"]))
                n_young = 1 + rng.binomial(2, 0.3, size=PAIRS_PER_CELL)
                fam = np.repeat(np.arange(PAIRS_PER_CELL), n_young)
                slots = rng.choice(n, size=len(fam), replace=False)
                a_o, z_o = draw_offspring(rng, prev["a"][dams[fam]], prev["a"][sires[fam]])
                a[slots], z[slots] = a_o, z_o
                dam[slots] = prev["ids"][dams[fam]]
                sire[slots] = prev["ids"][sires[fam]]
            if (season, code) == GENUINE_EXTREME[:2]:
                z[GENUINE_EXTREME[2], GENUINE_EXTREME[3]] = GENUINE_EXTREME[4]
            z = np.column_stack([np.round(z[:, k], DECIMALS[k]) for k in range(3)])
            survived, brood = draw_fitness(rng, z, season, code)
            ids = np.array([f"{code}{season[2:]}-{i:04d}" for i in range(1, n + 1)], dtype=object)
            cells[(season, code)] = dict(ids=ids, a=a, z=z, dam=dam, sire=sire,
                                         survived=survived, brood=brood)
    return cells


def _num(value: float, decimals: int, comma: bool = False) -> str:
    text = f"{value:.{decimals}f}"
    return text.replace(".", ",") if comma else text


def _csv(header: list[str], rows: list[list[str]], sep: str = ",", bom: bool = False, crlf: bool = False) -> bytes:
    buf = io.StringIO()
    writer = csv.writer(buf, delimiter=sep, lineterminator="\r\n" if crlf else "\n")
    writer.writerow(header)
    writer.writerows(rows)
    return ("\ufeff" if bom else "").encode() + buf.getvalue().encode("utf-8")


OBSERVERS = {"UR": "I. Varga", "BS": "T. Okonkwo", "MS": "L. Brandt"}
MEASURE_DATES = {
    "2023": {"UR": "2023-05-16", "BS": "2023-05-18", "MS": "2023-05-19"},
    "2024": {"UR": "2024-05-14", "BS": "2024-05-15", "MS": "2024-05-17"},
    "2025": {"UR": "2025-05-13", "BS": "2025-05-14", "MS": "2025-05-16"},
}
SURVIVAL_DATES = {"2023": "2023-07-20", "2024": "2024-07-18", "2025": "2025-07-21"}
BROOD_DATES = {"2023": "2023-09-02", "2024": "2024-09-03", "2025": "2025-09-04"}
SLUG = {"UR": "upper_ridge", "BS": "birch_saddle", "MS": "mosskettle_scree"}


def measure_rows(cell: dict, season: str, code: str, comma: bool = False) -> tuple[list[str], list[list]]:
    with_parents = season != SEASONS[0]
    header = ["tag", "season", "site", *TRAITS] + (["dam", "sire"] if with_parents else []) + ["date", "observer"]
    rows = []
    for i, tag in enumerate(cell["ids"]):
        row = [tag, season, SITES[code]] + [_num(cell["z"][i, k], DECIMALS[k], comma) for k in range(3)]
        if with_parents:
            row += [cell["dam"][i], cell["sire"][i]]
        rows.append(row + [MEASURE_DATES[season][code], OBSERVERS[code]])
    return header, rows


def census_rows(cells: dict, season: str, column: str) -> tuple[list[str], list[list]]:
    """All beetles of a season (survival) or the survivors only (brood), in ID order by site."""
    rows = []
    when = SURVIVAL_DATES[season] if column == "survived" else BROOD_DATES[season]
    for code in SITES:
        cell = cells[(season, code)]
        for i, tag in enumerate(cell["ids"]):
            value = cell[column][i]
            if np.isnan(value):
                continue
            rows.append([tag, season, str(int(value)), when, "census crew"])
    return ["tag", "season", column, "date", "observer"], rows


FIXED_TIME = datetime(2025, 9, 30, 12, 0, 0)


def _xlsx(header: list[str], rows: list[list], kinds: list[str]) -> bytes:
    """A spreadsheet as a field laptop writes it: numbers as numbers, dates as dates.
    Written with fixed timestamps so the bytes repeat on one machine."""
    from openpyxl import Workbook

    wb = Workbook()
    ws = wb.active
    ws.title = "beetles"
    ws.append(header)
    for row in rows:
        cells = []
        for value, kind in zip(row, kinds):
            if value == "":
                cells.append(None)
            elif kind == "int":
                cells.append(int(value))
            elif kind == "float":
                cells.append(float(value))
            elif kind == "date":
                cells.append(date.fromisoformat(value))
            else:
                cells.append(value)
        ws.append(cells)
    wb.properties.creator = "station laptop"
    wb.properties.created = FIXED_TIME
    wb.properties.modified = FIXED_TIME
    raw = io.BytesIO()
    wb.save(raw)
    out = io.BytesIO()
    stamp = re.compile(rb"(<dcterms:(?:created|modified)[^>]*>)[^<]*(</dcterms:)")
    with zipfile.ZipFile(raw) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            data = src.read(info.filename)
            if info.filename == "docProps/core.xml":
                data = stamp.sub(rb"\g<1>2025-09-30T12:00:00Z\g<2>", data)
            dst.writestr(zipfile.ZipInfo(info.filename, date_time=(2025, 9, 30, 12, 0, 0)), data)
    return out.getvalue()


def build_batches(seed: int = SEED) -> dict[str, bytes]:
    """File name -> bytes, in arrival order, with the season's realistic mistakes."""
    rng = np.random.default_rng(seed)
    cells = simulate(rng)
    files: dict[str, bytes] = {}

    def name(num: int, when: str, what: str, ext: str = "csv") -> str:
        return f"{num:02d}_{when}_{what}.{ext}"

    # 2023: first season, no parents known
    h, rows = measure_rows(cells[("2023", "UR")], "2023", "UR")
    files[name(1, MEASURE_DATES["2023"]["UR"], "upper_ridge_measures")] = _csv(h, rows)

    h, rows = measure_rows(cells[("2023", "BS")], "2023", "BS")
    slip = 136  # decimal slip: mandible 1.xx written with the point one place late
    rows[slip][4] = _num(float(rows[slip][4]) * 10, 1)
    files[name(2, MEASURE_DATES["2023"]["BS"], "birch_saddle_measures")] = _csv(h, rows)

    h, rows = measure_rows(cells[("2023", "MS")], "2023", "MS")
    files[name(3, MEASURE_DATES["2023"]["MS"], "mosskettle_scree_measures", "xlsx")] = _xlsx(
        h, rows, ["text", "int", "text", "float", "float", "float", "date", "text"])

    h, rows = census_rows(cells, "2023", "survived")
    # transposed digits in one tag: BS23-0391 written BS23-0931 (no such beetle)
    k = next(i for i, r in enumerate(rows) if r[0] == "BS23-0391")
    rows[k][0] = "BS23-0931"
    files[name(4, SURVIVAL_DATES["2023"], "census_survival")] = _csv(h, rows)

    h, rows = census_rows(cells, "2023", "brood")
    files[name(5, BROOD_DATES["2023"], "census_brood")] = _csv(h, rows)

    # 2024: offspring of last season's pairs among the marked beetles
    h, rows = measure_rows(cells[("2024", "UR")], "2024", "UR")
    rows.insert(212, list(rows[211]))  # the same line entered twice
    files[name(6, MEASURE_DATES["2024"]["UR"], "upper_ridge_measures")] = _csv(h, rows)

    h, rows = measure_rows(cells[("2024", "BS")], "2024", "BS", comma=True)
    files[name(7, MEASURE_DATES["2024"]["BS"], "birch_saddle_measures")] = _csv(h, rows, sep=";", bom=True, crlf=True)

    h, rows = measure_rows(cells[("2024", "MS")], "2024", "MS")
    drop = h.index("season")  # a first copy lost its season column in a spreadsheet edit: refused whole
    files[name(8, MEASURE_DATES["2024"]["MS"], "mosskettle_scree_measures")] = _csv(
        [c for j, c in enumerate(h) if j != drop], [[v for j, v in enumerate(r) if j != drop] for r in rows])
    files[name(9, MEASURE_DATES["2024"]["MS"], "mosskettle_scree_measures_resent")] = _csv(h, rows)

    h, rows = census_rows(cells, "2024", "survived")
    files[name(10, SURVIVAL_DATES["2024"], "census_survival")] = _csv(h, rows)

    h, rows = census_rows(cells, "2024", "brood")
    files[name(11, BROOD_DATES["2024"], "census_brood", "xlsx")] = _xlsx(h, rows, ["text", "int", "int", "date", "text"])

    # 2025
    h, rows = measure_rows(cells[("2025", "UR")], "2025", "UR")
    files[name(12, MEASURE_DATES["2025"]["UR"], "upper_ridge_measures")] = _csv(h, rows)

    h, rows = measure_rows(cells[("2025", "BS")], "2025", "BS")
    rows[57][2] = "Lower Ridge"  # a beetle caught at a spot that is not a study site
    files[name(13, MEASURE_DATES["2025"]["BS"], "birch_saddle_measures")] = _csv(h, rows)

    h, rows = measure_rows(cells[("2025", "MS")], "2025", "MS")
    files[name(14, MEASURE_DATES["2025"]["MS"], "mosskettle_scree_measures")] = _csv(h, rows)

    h, rows = census_rows(cells, "2025", "survived")
    files[name(15, SURVIVAL_DATES["2025"], "census_survival")] = _csv(h, rows)

    h, rows = census_rows(cells, "2025", "brood")
    files[name(16, BROOD_DATES["2025"], "census_brood")] = _csv(h, rows)
    return files


def write_batches(out: Path, seed: int = SEED) -> list[Path]:
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for fname, data in build_batches(seed).items():
        path = out / fname
        path.write_bytes(data)
        paths.append(path)
    return paths


# --- true values ----------------------------------------------------------------------------
def _standardize(z: np.ndarray) -> np.ndarray:
    return (z - z.mean(axis=0)) / z.std(axis=0, ddof=1)


def _ols(y: np.ndarray, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Slopes and their classical standard errors (here: the Monte Carlo error of a true value)."""
    X1 = np.column_stack([np.ones(len(y)), X])
    xtx_inv = np.linalg.inv(X1.T @ X1)
    coef = xtx_inv @ (X1.T @ y)
    resid = y - X1 @ coef
    se = np.sqrt(np.diag(xtx_inv) * (resid @ resid) / (len(y) - X1.shape[1]))
    return coef[1:], se[1:]


def _quadratic_design(x: np.ndarray) -> tuple[np.ndarray, list[str]]:
    cols, terms = [x], list(TRAITS)
    for j in range(3):
        cols.append(0.5 * x[:, [j]] ** 2)
        terms.append(f"{TRAITS[j]}^2")
    for j in range(3):
        for k in range(j + 1, 3):
            cols.append(x[:, [j]] * x[:, [k]])
            terms.append(f"{TRAITS[j]}:{TRAITS[k]}")
    return np.hstack(cols), terms


def truth(n_per_season: int = TRUTH_N, seed: int = TRUTH_SEED) -> list[dict]:
    """True values of the targeted quantities: the estimators' own definitions (estimation.md)
    applied to a very large sample from the generating model. Per season, pooled over the
    sites (fitness relativized and traits standardized within each site first), and per site."""
    rng = np.random.default_rng(seed)
    out: list[dict] = []
    per_site = n_per_season // len(SITES)
    cov_aw: dict[tuple[str, str], list] = {}  # (season, fitness) -> per cell, breeding value x relative fitness
    for season in SEASONS:
        pooled: dict[str, list] = {}
        for code, site in SITES.items():
            a, z = draw_individuals(rng, per_site)
            survived, brood = draw_fitness(rng, z, season, code)
            total = np.where(survived == 1, brood, 0.0)
            for fit, W in (("survived", survived), ("brood", brood), ("total", total)):
                keep = ~np.isnan(W)
                w = W[keep] / W[keep].mean()
                x = _standardize(z[keep])
                pooled.setdefault(fit, []).append((w, x))
                out += _cell_truth(season, site, fit, w, x)
                if fit != "brood":
                    cov_aw.setdefault((season, fit), []).append((a - a.mean(axis=0)) * (w - 1.0)[:, None])
        for fit, parts in pooled.items():
            w = np.concatenate([p[0] for p in parts])
            x = np.vstack([p[1] for p in parts])
            out += _cell_truth(season, "all", fit, w, x)
    out += heritability_truth(rng, n_per_season)
    out += pedigree_truth(cov_aw)
    return out


def pedigree_truth(cov_aw: dict[tuple[str, str], list]) -> list[dict]:
    """What the animal model estimates. V_A, h² and the genetic correlations (season and site ``all``) are the
    generating model's own: parents were taken at random, so the base population's G holds in every season
    (exact, no Monte Carlo error). The Robertson-Price response, cov_A(trait, relative fitness) with fitness
    relative within its site and season, differs between seasons as selection does: it is given per season,
    pooled over the sites, from the large sample. (The animal model pools the seasons, weighting each by the
    relatives it links, so its one estimate lies among these.) Brood has none: only survivors have a brood
    value, a selected sample."""
    def row(season, quantity, term, value, mc_se=np.nan, fitness="", n=""):
        return dict(season=season, site="all", fitness=fitness, quantity=quantity, term=term, value=value,
                    mc_se=mc_se, n=n)

    rows = [row("all", "additive_variance", t, G[j, j]) for j, t in enumerate(TRAITS)]
    rows += [row("all", "heritability_pedigree", t, H2[j]) for j, t in enumerate(TRAITS)]
    rows += [row("all", "genetic_correlation", f"{TRAITS[j]}:{TRAITS[k]}", GEN_CORR[j, k])
             for j in range(3) for k in range(j + 1, 3)]
    for (season, fit), parts in cov_aw.items():
        prod = np.vstack(parts)
        for j, t in enumerate(TRAITS):
            rows.append(row(season, "response_price", t, prod[:, j].mean(),
                            prod[:, j].std(ddof=1) / np.sqrt(len(prod)), fit, len(prod)))
    return rows


def _cell_truth(season: str, site: str, fit: str, w: np.ndarray, x: np.ndarray) -> list[dict]:
    rows = []
    n = len(w)

    def add(quantity, term, value, mc_se):
        rows.append(dict(season=season, site=site, fitness=fit, quantity=quantity, term=term, value=value,
                         mc_se=mc_se, n=n))

    wx = w[:, None] * x  # x has mean 0 in each cell, so S/sd = mean(w·x)
    for j, t in enumerate(TRAITS):
        add("differential_std", t, wx[:, j].mean(), wx[:, j].std(ddof=1) / np.sqrt(n))
    beta, se = _ols(w, x)
    for j, t in enumerate(TRAITS):
        add("gradient", t, beta[j], se[j])
    X, terms = _quadratic_design(x)
    coef, se = _ols(w, X)
    for c, s, t in zip(coef[3:], se[3:], terms[3:]):
        add("quadratic" if t.endswith("^2") else "correlational", t, c, s)
    add("opportunity", "", w.var(), np.nan)
    return rows


def heritability_truth(rng: np.random.Generator, n_families: int) -> list[dict]:
    """Slope of the offspring family mean on the midparent, over n_families unselected pairs."""
    a_d, z_d = draw_individuals(rng, n_families)
    a_s, z_s = draw_individuals(rng, n_families)
    n_young = 1 + rng.binomial(2, 0.3, size=n_families)
    fam = np.repeat(np.arange(n_families), n_young)
    _, z_o = draw_offspring(rng, a_d[fam], a_s[fam])
    counts = np.bincount(fam)
    rows = []
    for j, t in enumerate(TRAITS):
        fam_mean = np.bincount(fam, weights=z_o[:, j]) / counts
        mid = (z_d[:, j] + z_s[:, j]) / 2
        slope, se = _ols(fam_mean, mid[:, None])
        rows.append(dict(season="all", site="all", fitness="", quantity="heritability", term=t,
                         value=slope[0], mc_se=se[0], n=n_families))
    return rows


def write_truth(path: Path, rows: list[dict]) -> None:
    with path.open("w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=["season", "site", "fitness", "quantity", "term", "value", "mc_se", "n"],
                                lineterminator="\n")
        writer.writeheader()
        for r in rows:
            small = r["quantity"] in ("additive_variance", "response_price")  # in trait units: keep 4 figures
            value = f"{r['value']:.4g}" if small else f"{r['value']:.4f}"
            mc = "" if np.isnan(r["mc_se"]) else f"{r['mc_se']:.2g}" if small else f"{r['mc_se']:.4f}"
            writer.writerow({**r, "value": value, "mc_se": mc})


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the demo season's batch files (or its true values).")
    parser.add_argument("--out", type=Path, default=HERE / "batches", help="folder for the batch files")
    parser.add_argument("--truth", action="store_true",
                        help=f"compute the true values from {TRUTH_N:,} individuals a season "
                             "and write demo_season/true_values.csv")
    parser.add_argument("--truth-n", type=int, default=TRUTH_N, help="individuals per season for --truth")
    args = parser.parse_args(argv)
    if args.truth:
        rows = truth(args.truth_n)
        write_truth(HERE / "true_values.csv", rows)
        for r in rows:
            if r["site"] == "all" and r["quantity"] not in ("differential_std", "quadratic", "opportunity",
                                                                 "response_price"):
                print(f"{r['season']:>5} {r['fitness']:>9} {r['quantity']:>21} {r['term']:>15} {r['value']:+.4f} "
                      f"± {r['mc_se']:.4f}")
        return 0
    for path in write_batches(args.out):
        print(path)
    return 0


if __name__ == "__main__":
    sys.exit(main())
