"""``fieldslope report``: one self-contained HTML page about a study, to read, print or send.

No network: styles are inline, pictures are inlined SVG drawn by :mod:`tui.report_figures`. Every
number is a row of the estimates table (each table row carries its key and exact value in
``data-key`` / ``data-value`` attributes, which the tests compare with ``fieldslope estimate``).
Every text from data passes through :func:`esc` (control characters shown as escapes, then
HTML-escaped), so an ID like ``<img src=x onerror=alert(1)>`` appears as text.
"""

from __future__ import annotations

import html
import math
import re
from dataclasses import dataclass, field
from datetime import datetime, timezone

from fieldslope.tui.number_text import tau2_text
from fieldslope.tui.summary import default_fitness, shown

from fieldslope.common.names import ALL, Q

# the order quantities are listed in; quantities not named here (added later) follow by name
ORDER = (Q.MEAN, Q.SD, Q.OPPORTUNITY, Q.DIFFERENTIAL, Q.DIFFERENTIAL_STD, Q.GRADIENT, Q.GRADIENT_RAW,
         Q.GRADIENT_LOGISTIC, Q.QUADRATIC, Q.CORRELATIONAL, Q.CANONICAL)
LABELS = {
    "mean": "mean", "sd": "standard deviation", "opportunity": "opportunity for selection I",
    "differential": "selection differential S", "differential_std": "S / sd",
    "gradient": "linear gradient β", "gradient_raw": "β / sd (trait units)",
    "gradient_logistic": "logistic gradient (0/1 fitness)", "quadratic": "quadratic gradient γ",
    "correlational": "correlational gradient γ", "canonical": "canonical axis (eigenvalue of γ)",
    "gradient_mean": "weighted mean β across seasons", "gradient_tau2": "between-season variance τ²",
    "gradient_q": "Cochran's Q", "sign_changes": "sign changes", "heritability": "heritability h²",
    "response": "response R = h²S", "response_pct": "R as % of the mean", "response_multi": "Δz̄ = Gβ",
}
ACROSS = (Q.GRADIENT_MEAN, Q.GRADIENT_TAU2, Q.GRADIENT_Q, Q.SIGN_CHANGES)
RESPONSE = (Q.RESPONSE, Q.RESPONSE_PCT, Q.RESPONSE_MULTI)
PROJECT_GENERATIONS = (1, 5, 10)

CONVENTIONS = (
    ("relative fitness", "w = W / mean(W) within each cell (season × site)", ""),
    ("standardized trait", "(z − mean) / sd, sd with divisor n − 1", ""),
    ("opportunity for selection", "I = var(w), divisor n", "Arnold & Wade 1984, Evolution 38:709–719"),
    ("selection differential", "S = mean(w·z) − mean(z); S/sd in sd units", "Lande & Arnold 1983, Evolution 37:1210–1226"),
    ("linear gradient", "β from OLS of w on all standardized traits", "Lande & Arnold 1983"),
    ("quadratic and correlational gradients", "OLS of w on x, ½x² and x_j·x_k; γ_jj is the coefficient of ½x_j²",
     "Stinchcombe et al. 2008, Evolution 62:2435–2440"),
    ("canonical analysis", "eigenvalues of γ, largest first", "Phillips & Arnold 1989, Evolution 43:1209–1222"),
    ("logistic gradients (0/1 fitness)", "b_j · mean(p̂(1−p̂)) / mean(W)", "Janzen & Stern 1998, Evolution 52:1564–1571"),
    ("heritability", "offspring family mean on midparent, or 2 × slope on one parent",
     "Falconer & Mackay 1996, Introduction to Quantitative Genetics"),
    ("response", "R = h²S; multi-trait Δz̄ = Gβ", "Lande 1979, Evolution 33:402–416"),
    ("variation across seasons", "inverse-variance weighted mean, Cochran's Q, DerSimonian–Laird τ²",
     "DerSimonian & Laird 1986, Controlled Clinical Trials 7:177–188"),
    ("uncertainty", "OLS standard errors; 95 % percentile bootstrap resampling individuals within cells; "
     "permutation p-values within cells", "Efron & Tibshirani 1993, An Introduction to the Bootstrap"),
    ("fitness function (pictures)", "cubic smoothing spline of w on the standardized trait, smoothing chosen "
     "by generalized cross-validation; 95 % pointwise bootstrap band with the smoothing held fixed",
     "Schluter 1988, Evolution 42:849–861; Craven & Wahba 1979, Numer. Math. 31:377–403"),
)

CAUTIONS = (
    "Associations, not causes. Selection differentials and gradients describe how fitness co-varies with "
    "the measured traits in these individuals. They do not show that a trait causes higher fitness: "
    "selection on a measured trait can reflect selection on an unmeasured trait correlated with it, and "
    "environmental effects on both trait and fitness bias the estimates.",
    "Predicted responses assume constant selection, an additive genetic basis, and heritabilities and "
    "genetic correlations that hold in this population; treat them as expectations, not forecasts.",
    "Field work follows local permits and animal-care rules: capture, marking, handling and any sampling "
    "of animals or plants must follow the permits, animal-welfare approvals and land-access rules that "
    "apply where the work is done.",
)

CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;max-width:60rem;margin:1.5rem auto;
padding:0 1rem;color:#1b1b1b;background:#fff;line-height:1.4}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{border-bottom:1px solid #bbb;margin-top:2rem}
h3{margin-bottom:.3rem}table{border-collapse:collapse;margin:.4rem 0 1rem;font-size:.85rem}
th,td{border-bottom:1px solid #ddd;padding:.15rem .5rem;text-align:left;vertical-align:top}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
tr.excl td{font-weight:600}.meta{color:#555;font-size:.9rem}.note{color:#444;font-size:.85rem}
figure{margin:1rem 0;break-inside:avoid;page-break-inside:avoid}figure svg{max-width:100%;height:auto}
figcaption{font-size:.85rem;color:#333}nav ol{columns:2;font-size:.9rem}
.caution{border-left:4px solid #b35900;padding:.3rem .8rem;background:#fff7ef}
@media print{body{max-width:none;margin:0;font-size:10pt}nav{display:none}
h2{break-before:page;page-break-before:always}h2.first{break-before:auto;page-break-before:auto}
table,figure,.cell{break-inside:avoid;page-break-inside:avoid}a{color:inherit;text-decoration:none}
.caution{background:none}}
"""


def esc(value: object) -> str:
    """Text from data for the page: controls shown as escapes, then HTML-escaped (quotes too)."""
    return html.escape(shown(value), quote=True)


def num(value, digits: int = 4) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    try:
        if value != value:
            return ""
    except TypeError:
        return ""
    return f"{float(value):.{digits}g}"


def p_text(value) -> str:
    if value is None or value != value:
        return ""
    return "<0.001" if value < 0.001 else f"{value:.3f}"


def _f(value):
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _slug(*parts: object) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "-", "_".join(str(p) for p in parts)).strip("-")[:80] or "figure"


@dataclass
class Options:
    season: str | None = None
    site: str | None = None
    since: str | None = None
    fitness: str | None = None
    bootstrap: int = 2000
    seed: int | None = None
    png: bool = False


@dataclass
class Report:
    html: str
    figures: list = field(default_factory=list)


def quantity_order(names) -> list[str]:
    """Known quantities in their order, then any others by name (new quantities appear by themselves)."""
    names = list(dict.fromkeys(names))
    return [q for q in ORDER if q in names] + sorted(q for q in names if q not in ORDER)


def build(study, options: Options, progress=None, say=None) -> Report:
    """The whole page for ``study`` (a schemas.study.Study); ``say`` hears a sentence when what was worked
    out cannot be kept for the next run (``tui.estimate_cache``)."""
    from fieldslope.common.errors import FieldslopeError
    from fieldslope.tui import report_figures as figs
    from fieldslope.tui.bridge import estimates_for_frame
    from fieldslope.tui.estimate_cache import cached, table_options
    from fieldslope.tui.summary import gather as summary_cells

    protocol, store = study.protocol, study.store
    frame = store.effective_frame()
    if frame.empty:
        raise FieldslopeError("no records yet; take in batch files with fieldslope import FILE first.")
    fitness = options.fitness or default_fitness(protocol)
    if fitness not in protocol.fitness:
        raise FieldslopeError(f"there is no fitness measure {fitness!r}; choose one of {', '.join(protocol.fitness)}.")
    seasons_all = sorted(frame[protocol.season_col].dropna().astype(str).unique())
    if options.season is not None and options.season not in seasons_all:
        raise FieldslopeError(f"there is no season {options.season!r} on record; choose one of {', '.join(seasons_all)}.")
    # one fitness measure (the whole table's numbers for it), kept for the next run (tui.estimate_cache)
    est = cached(study, table_options(bootstrap=options.bootstrap, seed=options.seed, fitness=fitness),
                 lambda: estimates_for_frame(frame, protocol, bootstrap=options.bootstrap, seed=options.seed,
                                             h2=store.heritability() or None, progress=progress, fitness=fitness),
                 say=say)
    table = est.table
    sites_all = sorted(s for s in set(table["site"]) if s != ALL)
    if options.site is not None and options.site != ALL and options.site not in sites_all:
        raise FieldslopeError(f"there is no site {options.site!r} on record; choose one of {', '.join(sites_all)} or all.")
    seasons = [options.season] if options.season else seasons_all
    info = summary_cells(study, bootstrap=0, say=say)
    batches = store.batches()
    figures: list = []
    out: list[str] = []
    w = out.append
    pg = _Page(study, protocol, store, frame, est, table, options, fitness, seasons, seasons_all, sites_all,
               info, batches, figures, w, figs, options.site or ALL, list(protocol.trait_names), say)
    for section in (_page_head, _study_section, _selection_section, _fitness_functions_section,
                    _surfaces_section, _across_section, _response_section, _closing_sections):
        section(pg)
    return Report("\n".join(out), figures)


@dataclass
class _Page:
    """What every section of the page reads: the study, its estimates and the options, and ``w`` to
    write HTML (with ``figures`` collecting the pictures)."""

    study: object
    protocol: object
    store: object
    frame: object
    est: object
    table: object
    options: Options
    fitness: str
    seasons: list
    seasons_all: list
    sites_all: list
    info: dict
    batches: list
    figures: list
    w: object
    figs: object
    pic_site: str
    traits: list
    say: object = None     # hears a sentence when a result cannot be kept for the next run


def _page_head(pg: _Page) -> None:
    """The page head: title, what the figures come from, and the table of contents."""
    study, protocol, options, fitness, batches, w = (
        pg.study, pg.protocol, pg.options, pg.fitness, pg.batches, pg.w)

    name = protocol.name or "study"
    stamp = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    last = max((b.id for b in batches), default=0)
    w("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">")
    w(f"<title>{esc(name)} · selection report</title>")
    w("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">")
    w(f"<style>{CSS}</style></head><body>")
    w(f"<h1>{esc(name)}: selection report</h1>")
    from importlib import metadata

    try:
        version = metadata.version("fieldslope")
    except metadata.PackageNotFoundError:
        version = "(not installed)"
    w(f"<p class=\"meta\">Study folder {esc(study.root)} · data as of batch {last} · made {stamp} by "
      f"fieldslope {esc(version)} · {options.bootstrap} bootstrap resamples and permutations, seed "
      f"{options.seed if options.seed is not None else 'default'} · fitness in the selection tables and "
      f"pictures: <b>{esc(fitness)}</b>"
      + (f" · season {esc(options.season)}" if options.season else "")
      + (f" · site {esc(options.site)}" if options.site else "") + "</p>")
    sections = ["The study", "Selection by season and site", "Fitness functions", "Fitness surfaces",
                "Across seasons", "Response to selection"]
    if options.since is not None:
        sections.append("What changed")
    sections += ["Conventions and sources", "Cautions"]
    w("<nav><ol>" + "".join(f"<li><a href=\"#{_slug(s)}\">{s}</a></li>" for s in sections) + "</ol></nav>")


def _study_section(pg: _Page) -> None:
    """The study: traits, fitness measures, seasons and sites, intake, open flags."""
    protocol, store, options, info, batches, figures, w, figs = (
        pg.protocol, pg.store, pg.options, pg.info, pg.batches, pg.figures, pg.w, pg.figs)
    w(f"<h2 id=\"{_slug('The study')}\" class=\"first\">The study</h2>")
    w("<table><caption>Traits</caption><tr><th>trait</th><th>what</th><th>unit</th>"
      "<th class=\"num\">plausible range</th></tr>")
    for t, spec in protocol.traits.items():
        w(f"<tr><td>{esc(t)}</td><td>{esc(spec.label or '')}</td><td>{esc(spec.unit or '')}</td>"
          f"<td class=\"num\">{num(spec.min)} – {num(spec.max)}</td></tr>")
    w("</table><table><caption>Fitness measures</caption><tr><th>measure</th><th>kind</th><th>what</th></tr>")
    for f_name, spec in protocol.fitness.items():
        kind = ("product of " + " × ".join(esc(p) for p in spec.product)) if spec.is_total else esc(spec.kind)
        w(f"<tr><td>{esc(f_name)}</td><td>{kind}</td><td>{esc(getattr(spec, 'label', '') or '')}</td></tr>")
    w("</table>")
    measures = info["fitness_measures"]
    w("<table><caption>Seasons and sites: individuals, how many have each fitness value, open flags</caption>"
      "<tr><th>season</th><th>site</th><th class=\"num\">n</th>"
      + "".join(f"<th class=\"num\">{esc(m)}</th>" for m in measures) + "<th class=\"num\">open flags</th></tr>")
    for c in info["cells"]:
        w(f"<tr><td>{esc(c['season'])}</td><td>{esc(c['site'])}</td><td class=\"num\">{c['n']}</td>"
          + "".join(f"<td class=\"num\">{c['measured'].get(m, 0)}</td>" for m in measures)
          + f"<td class=\"num\">{c['open_flags']}</td></tr>")
    w("</table>")
    from fieldslope.tui.estimate_cache import kept

    days = _intake_days(batches)
    series = kept(pg.study, {"what": "intake series"}, lambda: _intake_series(store, protocol, batches), pg.say)
    if series:
        fig = figs.intake_figure(series, "intake", png=options.png)
        figures.append(fig)
        w(_figure(fig, "Individuals on record at each site after each batch that changed them."))
    w("<table><caption>Intake by day (the day each batch was taken in, UTC)</caption><tr><th>day</th>"
      "<th class=\"num\">batches</th><th class=\"num\">refused</th><th class=\"num\">rows stored</th>"
      "<th>operators</th></tr>")
    for day, d in days.items():
        w(f"<tr><td>{esc(day)}</td><td class=\"num\">{d['batches']}</td><td class=\"num\">{d['refused']}</td>"
          f"<td class=\"num\">{d['stored']}</td><td>{esc(', '.join(sorted(d['operators'])))}</td></tr>")
    w("</table>")
    from fieldslope.common.names import flag_label as kind_label

    flags = info["open_flags"]
    if flags:
        w("<table><caption>Open flags by kind</caption><tr><th>kind</th><th class=\"num\">open</th></tr>"
          + "".join(f"<tr><td>{esc(kind_label(k))}</td><td class=\"num\">{n}</td></tr>" for k, n in flags.items())
          + "</table>")
    else:
        w("<p>No open flags.</p>")


def _selection_section(pg: _Page) -> None:
    """Selection tables of each season and site for the chosen fitness, with their notes."""
    est, table, options, fitness, seasons, sites_all, w = (
        pg.est, pg.table, pg.options, pg.fitness, pg.seasons, pg.sites_all, pg.w)
    w(f"<h2 id=\"{_slug('Selection by season and site')}\">Selection by season and site</h2>")
    w(f"<p class=\"note\">Fitness measure {esc(fitness)}; other measures with <code>--fitness</code> or in "
      "<code>fieldslope estimate --format csv</code>. Intervals are 95 % percentile bootstrap intervals, "
      "p-values permutation tests within cells (see Conventions); rows whose interval excludes zero are bold. "
      "Site “all” is the season's pooled estimate.</p>")
    for season in seasons:
        w(f"<h3>Season {esc(season)}</h3>")
        sites = [ALL, *sites_all] if options.site is None else [options.site]
        for site in sites:
            block = table[(table["season"] == season) & (table["site"] == site) & (table["fitness"] == fitness)
                          & ~table["quantity"].isin([*ACROSS, *RESPONSE, Q.HERITABILITY])]
            if block.empty:
                continue
            w(f"<div class=\"cell\"><table><caption>season {esc(season)} · site {esc(site)} · fitness "
              f"{esc(fitness)}</caption>" + _head())
            for q in quantity_order(block["quantity"]):
                for r in block[block["quantity"] == q].itertuples(index=False):
                    w(_row(r))
            w("</table></div>")
        notes = [n for n in est.notes if n.season in (season, "") and n.fitness in (fitness, "")
                 and (options.site is None or n.site in (options.site, ALL, ""))]
        if notes:
            w("<ul class=\"note\">" + "".join(f"<li>{esc(_where(n))}{esc(n.message)}</li>" for n in notes[:40])
              + "</ul>")


def _fitness_functions_section(pg: _Page) -> None:
    """Fitness functions: a smoothing spline and its bootstrap band per season and trait."""
    protocol, frame, options, fitness, seasons, figures, w, figs, pic_site = (
        pg.protocol, pg.frame, pg.options, pg.fitness, pg.seasons, pg.figures, pg.w, pg.figs, pg.pic_site)
    from fieldslope.analysis.fitness_spline import fitness_function
    from fieldslope.analysis.table import DEFAULT_SEED
    from fieldslope.tui.estimate_cache import kept

    w(f"<h2 id=\"{_slug('Fitness functions')}\">Fitness functions</h2>")
    w("<p class=\"note\">Relative fitness against each standardized trait (within cells), with a cubic smoothing "
      "spline whose smoothing is chosen by generalized cross-validation and its 95 % pointwise bootstrap band "
      f"({options.bootstrap} resamples of individuals within cells; Schluter 1988, Evolution 42:849–861).</p>")
    seed = options.seed if options.seed is not None else DEFAULT_SEED
    for season in seasons:
        for trait in protocol.trait_names:
            x, W, cells = _cell_data(frame, protocol, season, pic_site, trait, fitness)
            where = f"season {season}, " + ("pooled over sites" if pic_site == ALL else f"site {pic_site}")
            if len(x) < 5:
                w(f"<p class=\"note\">{esc(trait)}, {esc(where)}: too few individuals for a curve.</p>")
                continue
            try:     # the band's resamples are the slow part: kept for the next run on the same record
                ff = kept(pg.study, {"what": "fitness function", "season": season, "site": pic_site, "trait": trait,
                                     "fitness": fitness, "resamples": options.bootstrap, "seed": seed},
                          lambda: fitness_function(x, W, cells, resamples=options.bootstrap, seed=seed,
                                                   labels=(season, pic_site, trait)),
                          pg.say, encode=_plain_curve, decode=_curve)
            except ValueError as exc:
                w(f"<p class=\"note\">{esc(trait)}, {esc(where)}: no curve ({esc(exc)}).</p>")
                continue
            fig = figs.fitness_function_figure(ff, x, _relative(W, cells), trait, where, _slug("fitness", season, pic_site, trait),
                                               png=options.png)
            figures.append(fig)
            band = ("" if ff.resamples else " No band: too many resamples could not be fitted.")
            w(_figure(fig, f"{shown(trait)}, {where}: n = {ff.n}, smoothing λ = {ff.fit.lam:.3g} "
                           f"({ff.fit.edf:.1f} effective degrees of freedom).{band}"))


def _surfaces_section(pg: _Page) -> None:
    """Fitness surfaces of each pair of traits from beta and gamma."""
    protocol, frame, table, options, fitness, seasons, figures, w, figs, pic_site, traits = (
        pg.protocol, pg.frame, pg.table, pg.options, pg.fitness, pg.seasons, pg.figures, pg.w, pg.figs,
        pg.pic_site, pg.traits)
    w(f"<h2 id=\"{_slug('Fitness surfaces')}\">Fitness surfaces</h2>")
    if len(traits) < 2:
        w("<p>The fitness surface needs two traits; this protocol has one.</p>")
    else:
        w("<p class=\"note\">Predicted relative fitness w = 1 + β·x + ½xᵀγx for each pair of traits (others at their "
          "mean), from β of the linear model and γ of the quadratic model (Lande & Arnold 1983, Evolution "
          "37:1210–1226), with the individuals as dots.</p>")
        for season in seasons:
            for i, a in enumerate(traits):
                for b in traits[i + 1:]:
                    vals = {key: _value(table, season, pic_site, fitness, *key) for key in
                            ((Q.GRADIENT, a), (Q.GRADIENT, b), (Q.QUADRATIC, f"{a}^2"), (Q.QUADRATIC, f"{b}^2"),
                             (Q.CORRELATIONAL, f"{a}:{b}"))}
                    where = f"season {season}, " + ("pooled over sites" if pic_site == ALL else f"site {pic_site}")
                    if any(v is None for v in vals.values()):
                        w(f"<p class=\"note\">{esc(a)} × {esc(b)}, {esc(where)}: no quadratic model (see the "
                          "notes).</p>")
                        continue
                    g12 = vals[(Q.CORRELATIONAL, f"{a}:{b}")]
                    gamma = ((vals[(Q.QUADRATIC, f"{a}^2")], g12), (g12, vals[(Q.QUADRATIC, f"{b}^2")]))
                    xa, _, _ = _cell_data(frame, protocol, season, pic_site, a, fitness)
                    xb, _, _ = _cell_data(frame, protocol, season, pic_site, b, fitness, paired=a)
                    xa2, _, _ = _cell_data(frame, protocol, season, pic_site, a, fitness, paired=b)
                    fig = figs.surface_figure((vals[(Q.GRADIENT, a)], vals[(Q.GRADIENT, b)]), gamma, (a, b), xa2, xb,
                                              where, _slug("surface", season, pic_site, a, b), png=options.png)
                    figures.append(fig)
                    w(_figure(fig, f"{shown(a)} and {shown(b)}, {where}."))


def _across_section(pg: _Page) -> None:
    """Across seasons: a forest picture of beta per season and the combined rows."""
    table, options, fitness, seasons_all, figures, w, figs, pic_site, traits = (
        pg.table, pg.options, pg.fitness, pg.seasons_all, pg.figures, pg.w, pg.figs, pg.pic_site, pg.traits)
    w(f"<h2 id=\"{_slug('Across seasons')}\">Across seasons</h2>")
    # every across-season quantity there is (new ones appear by themselves), heritability apart
    across = table[(table["season"] == ALL) & (table["quantity"] != Q.HERITABILITY) & (table["fitness"] == fitness)
                   & (table["site"] == pic_site)]
    if len(seasons_all) < 2 or across.empty:
        w("<p>One season only so far: nothing is combined across seasons.</p>")
    else:
        panels = []
        for trait in traits:
            rows = []
            for season in seasons_all:
                r = _row_of(table, season, pic_site, fitness, Q.GRADIENT, trait)
                if r is None:
                    continue
                lo, hi = _f(r["ci_low"]), _f(r["ci_high"])
                rows.append((season, _f(r["estimate"]), lo, hi))
            m = _row_of(table, ALL, pic_site, fitness, Q.GRADIENT_MEAN, trait)
            t2 = _row_of(table, ALL, pic_site, fitness, Q.GRADIENT_TAU2, trait)
            mean = None
            if m is not None and _f(m["estimate"]) is not None:
                se = _f(m["se"])
                mean = (_f(m["estimate"]), None if se is None else _f(m["estimate"]) - 1.96 * se,
                        None if se is None else _f(m["estimate"]) + 1.96 * se, None if t2 is None else _f(t2["estimate"]))
            if rows:
                panels.append((trait, rows, mean))
        if panels:
            where = "pooled over sites" if pic_site == ALL else f"site {pic_site}"
            fig = figs.forest_figure(panels, _slug("forest", pic_site, fitness),
                                     f"β in each season ({where}) with 95 % bootstrap intervals, and the weighted "
                                     "mean across seasons (± 1.96 se) with τ²", png=options.png)
            figures.append(fig)
            w(_figure(fig, fig.title + "."))
        w(f"<table><caption>Across seasons · site {esc(pic_site)} · fitness {esc(fitness)}</caption>" + _head())
        for q in quantity_order(across["quantity"]):
            for r in across[across["quantity"] == q].itertuples(index=False):
                w(_row(r))
        w("</table>")


def _response_section(pg: _Page) -> None:
    """Response to selection: heritability, expected responses and projected means."""
    table, fitness, seasons, w, pic_site, traits = (
        pg.table, pg.fitness, pg.seasons, pg.w, pg.pic_site, pg.traits)
    w(f"<h2 id=\"{_slug('Response to selection')}\">Response to selection</h2>")
    h2 = table[table["quantity"] == Q.HERITABILITY]
    if not h2.empty:
        w("<table><caption>Heritability</caption>" + _head() + "".join(_row(r) for r in h2.itertuples(index=False))
          + "</table>")
    latest = seasons[-1]
    resp = table[(table["season"] == latest) & (table["site"] == pic_site) & (table["fitness"] == fitness)
                 & table["quantity"].isin(RESPONSE)]
    if resp.empty:
        w(f"<p>No predicted response for season {esc(latest)}: it needs a heritability for each trait "
          "(estimated from parents and offspring, or entered in the dashboard).</p>")
    else:
        w(f"<table><caption>Expected response per generation · season {esc(latest)} · site {esc(pic_site)} · "
          f"fitness {esc(fitness)}</caption>" + _head())
        for q in quantity_order(resp["quantity"]):
            for r in resp[resp["quantity"] == q].itertuples(index=False):
                w(_row(r))
        w("</table>")
        from fieldslope.analysis.response import project_mean

        w("<table><caption>Projected trait mean under constant selection (R = h²S each generation)</caption>"
          "<tr><th>trait</th><th class=\"num\">now</th>"
          + "".join(f"<th class=\"num\">after {k}</th>" for k in PROJECT_GENERATIONS) + "</tr>")
        for trait in traits:
            mean_row = _row_of(table, latest, pic_site, fitness, Q.MEAN, trait)
            r_row = _row_of(table, latest, pic_site, fitness, Q.RESPONSE, trait)
            if mean_row is None or r_row is None or _f(r_row["estimate"]) is None:
                continue
            path = project_mean(_f(mean_row["estimate"]), _f(r_row["estimate"]), max(PROJECT_GENERATIONS))
            w(f"<tr><td>{esc(trait)}</td><td class=\"num\">{num(path[0])}</td>"
              + "".join(f"<td class=\"num\">{num(path[k])}</td>" for k in PROJECT_GENERATIONS) + "</tr>")
        w("</table>")


def _closing_sections(pg: _Page) -> None:
    """What changed (with --since), the conventions and sources, and the cautions."""
    study, options, w = (
        pg.study, pg.options, pg.w)
    if options.since is not None:
        from fieldslope.tui import changes

        info_c = changes.gather(study, options.since)
        w(f"<h2 id=\"{_slug('What changed')}\">What changed</h2>")
        w(changes_html(info_c))

    # -- conventions and cautions -----------------------------------------------------------------
    w(f"<h2 id=\"{_slug('Conventions and sources')}\">Conventions and sources</h2>")
    w("<table><tr><th>quantity</th><th>convention</th><th>source</th></tr>"
      + "".join(f"<tr><td>{html.escape(a)}</td><td>{html.escape(b)}</td><td>{html.escape(c)}</td></tr>"
                for a, b, c in CONVENTIONS) + "</table>")
    w("<p class=\"note\">The pooled estimate of a season relativizes fitness and standardizes traits within each "
      "cell first, then fits one regression on all rows of that season.</p>")
    w(f"<h2 id=\"{_slug('Cautions')}\">Cautions</h2>")
    w("".join(f"<p class=\"caution\">{html.escape(c)}</p>" for c in CAUTIONS))
    w("</body></html>\n")


def _head() -> str:
    return ("<tr><th>quantity</th><th>term</th><th class=\"num\">estimate</th><th class=\"num\">se</th>"
            "<th class=\"num\">95 % interval</th><th class=\"num\">p</th><th class=\"num\">n</th></tr>")


def _row(r) -> str:
    lo, hi = _f(r.ci_low), _f(r.ci_high)
    excl = lo is not None and hi is not None and (lo > 0 or hi < 0)
    key = "|".join(str(v) for v in (r.season, r.site, r.fitness, r.quantity, r.term))
    value = _f(r.estimate)
    n = "" if r.n is None or r.n != r.n else str(int(r.n))
    interval = f"{num(lo)} to {num(hi)}" if lo is not None and hi is not None else ""
    cls = ' class="excl"' if excl else ""
    exact = "" if value is None else repr(value)
    return (f"<tr{cls} data-key=\"{esc(key)}\" data-value=\"{exact}\">"
            f"<td>{esc(LABELS.get(r.quantity, r.quantity))}</td><td>{esc(r.term)}</td>"
            f"<td class=\"num\">{tau2_text(value) if r.quantity == Q.GRADIENT_TAU2 else num(value)}</td>"
            f"<td class=\"num\">{num(_f(r.se))}</td>"
            f"<td class=\"num\">{interval}</td><td class=\"num\">{html.escape(p_text(_f(r.p_value)))}</td>"
            f"<td class=\"num\">{n}</td></tr>")


def _where(note) -> str:
    parts = [p for p in (note.site, note.quantity) if p]
    return (" · ".join(parts) + ": ") if parts else ""


def _figure(fig, caption: str) -> str:
    return f"<figure>{fig.svg}<figcaption>{esc(caption)}</figcaption></figure>"


def _row_of(table, season, site, fitness, quantity, term):
    hit = table[(table["season"] == season) & (table["site"] == site) & (table["fitness"] == fitness)
                & (table["quantity"] == quantity) & (table["term"] == term)]
    return None if hit.empty else hit.iloc[0]


def _value(table, season, site, fitness, quantity, term):
    r = _row_of(table, season, site, fitness, quantity, term)
    return None if r is None else _f(r["estimate"])


def _relative(W, cells):
    import numpy as np

    codes = np.unique(cells, return_inverse=True)[1]
    mean = np.bincount(codes, weights=W) / np.bincount(codes)
    return W / mean[codes]


def _cell_data(frame, protocol, season, site, trait, fitness, paired: str | None = None):
    """(x standardized within cells, W, cell labels) of individuals with the trait (and ``paired``) and
    the fitness value, in ``season`` at ``site`` (all sites for ``all``), as the estimates use them."""
    import numpy as np

    from fieldslope.analysis.fitness import add_totals
    from fieldslope.tui.bridge import design_from_protocol

    f = frame[frame[protocol.season_col].astype(str) == str(season)]
    if fitness in protocol.totals:
        f = add_totals(f, design_from_protocol(protocol))
    groups = list(protocol.groups)
    key = (f[groups].astype(str).agg("/".join, axis=1) if len(groups) > 1 else f[groups[0]].astype(str)) \
        if groups else None
    if key is not None and site != ALL:
        f, key = f[key == str(site)], key[key == str(site)]
    need = [trait, fitness] + ([paired] if paired else [])
    ok = f[need].notna().all(axis=1)
    f = f[ok]
    labels = key[ok].to_numpy() if key is not None else np.array(["all"] * len(f))
    z, W = f[trait].to_numpy(float), f[fitness].to_numpy(float)
    x = np.empty_like(z)
    keep = np.ones(len(z), bool)
    for lab in np.unique(labels):
        m = labels == lab
        sd = z[m].std(ddof=1) if m.sum() > 1 else 0.0
        if not sd > 0 or not W[m].mean() > 0:
            keep &= ~m
            continue
        x[m] = (z[m] - z[m].mean()) / sd
    return x[keep], W[keep], labels[keep]


def _intake_days(batches) -> dict:
    """Intake by day: batches, refused, rows stored and operators."""
    days: dict = {}
    for b in batches:
        d = days.setdefault(str(b.received)[:10], {"batches": 0, "refused": 0, "stored": 0, "operators": set()})
        d["batches"] += 1
        d["refused"] += b.outcome == "refused"
        d["stored"] += int(b.n_stored or 0)
        d["operators"].add(b.operator)
    return days


def _plain_curve(ff) -> dict:
    """A fitness function as plain data (arrays as lists of floats, written exactly)."""
    fit = ff.fit
    return {"grid": ff.grid.tolist(), "curve": ff.curve.tolist(), "low": ff.low.tolist(), "high": ff.high.tolist(),
            "n": ff.n, "resamples": ff.resamples, "knots": fit.knots.tolist(), "g": fit.g.tolist(),
            "gamma": fit.gamma.tolist(), "lam": fit.lam, "edf": fit.edf, "gcv": fit.gcv}


def _curve(d: dict):
    import numpy as np

    from fieldslope.analysis.fitness_spline import FitnessFunction, SplineFit

    arr = {k: np.array(d[k], dtype=np.float64) for k in ("grid", "curve", "low", "high", "knots", "g", "gamma")}
    fit = SplineFit(arr["knots"], arr["g"], arr["gamma"], float(d["lam"]), float(d["edf"]), float(d["gcv"]))
    return FitnessFunction(arr["grid"], arr["curve"], arr["low"], arr["high"], fit, int(d["n"]), int(d["resamples"]))


def _intake_series(store, protocol, batches) -> dict:
    """Individuals on record per site after each batch that changed them: {site: [(batch, n), ...]}."""
    series: dict = {}
    groups = list(protocol.groups)
    last = None
    for b in batches:
        if b.outcome == "refused" or not b.n_stored:
            continue
        f = store.effective_frame(as_of_batch=b.id)
        if f.empty:
            continue
        key = (f[groups].astype(str).agg("/".join, axis=1) if len(groups) > 1 else f[groups[0]].astype(str)) \
            if groups else None
        counts = key.value_counts().to_dict() if key is not None else {"all": len(f)}
        if counts == last:
            continue
        last = counts
        for site, n in counts.items():
            series.setdefault(site, [(b.id, 0)] if series else []).append((b.id, int(n)))
    taken = [b.id for b in batches if b.outcome != "refused" and b.n_stored]
    for points in series.values():     # from the first batch to the last, so every line spans the season
        if taken and points[0][0] > taken[0]:
            points.insert(0, (taken[0], 0))
        if taken and points[-1][0] < taken[-1]:
            points.append((taken[-1], points[-1][1]))
    return dict(sorted(series.items()))


def changes_html(info: dict) -> str:
    from fieldslope.common.names import flag_label as kind_label

    out = [f"<p>Since {esc(info['since'])}.</p>"]
    if info["batches"]:
        out.append("<h3>New batches</h3><ul>" + "".join(
            f"<li>#{b['id']} {esc(b['file'])}: {esc(b['outcome'])}, {b['stored']} of {b['rows']} rows stored; by "
            f"{esc(b['operator'])}, {esc(str(b['received'])[:16])}</li>" for b in info["batches"]) + "</ul>")
    if info["flags_opened"]:
        out.append(f"<h3>Flags opened ({len(info['flags_opened'])})</h3><ul>" + "".join(
            f"<li>#{f['id']} {esc(kind_label(f['kind']))}: {esc(f['individual'])} {esc(f['season'])} "
            f"{esc(f['field'])} {esc(f['value'])}</li>" for f in info["flags_opened"][:200]) + "</ul>")
    for title, items in (("Flags resolved", info["flags_resolved"]), ("Corrections", info["corrections"])):
        if items:
            out.append(f"<h3>{title} ({len(items)})</h3><ul>" + "".join(
                f"<li>#{f['id']} {esc(kind_label(f['kind']))} {esc(f['individual'])} {esc(f['season'])} "
                f"{esc(f['field'])}: {esc(f['status'])}"
                + (f" {esc(f['value'])} → {esc(f['new_value'])}" if f["status"] == "set" else "")
                + f" by {esc(f['by'])}, {esc(str(f['at'])[:16])}; why: {esc(f['reason'])}</li>" for f in items[:200])
                + "</ul>")
    if info["moved"]:
        out.append("<h3>Estimates that moved by more than their earlier standard error</h3><table><tr><th>season</th>"
                   "<th>site</th><th>fitness</th><th>quantity</th><th>term</th><th class=\"num\">then</th>"
                   "<th class=\"num\">now</th><th class=\"num\">earlier se</th></tr>" + "".join(
                       f"<tr><td>{esc(m['season'])}</td><td>{esc(m['site'])}</td><td>{esc(m['fitness'])}</td>"
                       f"<td>{esc(m['quantity'])}</td><td>{esc(m['term'])}</td><td class=\"num\">{num(m['then'])}</td>"
                       f"<td class=\"num\">{num(m['now'])}</td><td class=\"num\">{num(m['se_then'])}</td></tr>"
                       for m in info["moved"][:100]) + "</table>")
    if len(out) == 1:
        out.append("<p>Nothing new.</p>")
    return "\n".join(out)


def write(report: Report, path, figures_dir=None) -> int:
    """Write the page (atomically) and, with ``figures_dir``, each picture as .svg and .png; returns
    the number of pictures written. Raises FieldslopeError with one sentence when a file cannot be written."""
    import os
    from pathlib import Path

    from fieldslope.common.errors import FieldslopeError

    def put(target: Path, data: bytes) -> None:
        tmp = target.with_name(target.name + ".part")
        try:
            with open(tmp, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, target)
        except OSError as exc:
            raise FieldslopeError(f"{target}: cannot write it ({exc.strerror}); check the folder and its "
                                  "permissions.") from None

    count = 0
    if figures_dir is not None:
        folder = Path(figures_dir)
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise FieldslopeError(f"{folder}: cannot make the folder for the pictures ({exc.strerror}).") from None
        for fig in report.figures:
            put(folder / f"{fig.name}.svg", ('<?xml version="1.0" encoding="utf-8"?>\n' + fig.svg).encode("utf-8"))
            if fig.png:
                put(folder / f"{fig.name}.png", fig.png)
            count += 1
    put(Path(path), report.html.encode("utf-8"))
    return count
