"""``fieldslope summary``: one screen of text about a study (or the same as JSON for scripts).

What it holds: every season and site with its individuals, how many have each fitness measure
and their open flags; the open flags by kind; the last batch; and for the latest season the pooled
β of each trait on one fitness measure with its bootstrap interval and permutation p-value, marked
where the interval excludes zero. The numbers are rows of the estimates table
(``fieldslope estimate --season S --site all``): one path from records to numbers.
"""

from __future__ import annotations

import math
from collections import Counter

from fieldslope.common.names import ALL, Q, Outcome
from fieldslope.tui import cli_format as fmt
from fieldslope.tui.safe_text import escape_controls

WIDTH = fmt.WIDTH


def shown(value: object) -> str:
    """Text from data (IDs, sites, file names, operators, reasons) as the terminal may show it: the one
    function every text from the record passes through on its way out (control and bidirectional
    characters written visibly by :func:`tui.safe_text.escape_controls`)."""
    return escape_controls(value)


def default_fitness(protocol) -> str:
    """The fitness measure the summary reports: the first declared total, else the first component."""
    totals = list(protocol.totals)
    return totals[0] if totals else protocol.component_names[0]


def _site_of(frame, protocol):
    """A cell's site name as the estimators name it (group values joined with "/")."""
    groups = list(protocol.groups)
    if not groups:
        return None
    if len(groups) == 1:
        return frame[groups[0]].astype(str)
    return frame[groups].astype(str).agg("/".join, axis=1)


def gather(study, *, fitness: str | None = None, bootstrap: int = 2000, seed: int | None = None,
           progress=None, say=None) -> dict:
    """Everything the summary shows, as plain data (the JSON output is exactly this). It is kept for the
    next run on the same record (``tui.estimate_cache``: a new batch, resolution or h² makes it anew);
    ``say`` hears a sentence when it cannot be kept."""
    from fieldslope.common.errors import FieldslopeError
    from fieldslope.tui.estimate_cache import kept

    protocol = study.protocol
    if fitness is not None and fitness not in protocol.fitness:
        raise FieldslopeError(f"there is no fitness measure {fitness!r}; choose one of "
                              f"{', '.join(protocol.fitness)}.")
    fitness = fitness or default_fitness(protocol)
    info = kept(study, {"what": "summary", "fitness": fitness, "bootstrap": bootstrap, "seed": seed},
                lambda: _gather(study, fitness, bootstrap, seed, progress), say)
    return info | {"study": str(study.root)}      # as this run names the folder, not as the one that kept it


def _gather(study, fitness: str, bootstrap: int, seed: int | None, progress) -> dict:
    protocol, store = study.protocol, study.store
    frame = store.effective_frame()
    flags = store.flags()
    batches = store.batches()
    measures = [*protocol.component_names, *protocol.totals]
    out: dict = {"study": str(study.root), "name": getattr(protocol, "name", "") or "",
                 "traits": list(protocol.trait_names), "fitness_measures": measures, "cells": [],
                 "open_flags": {}, "last_batch": None, "latest": None}
    out["cells"], unplaced = _cells(frame, protocol, flags, measures)
    out["open_flags"] = dict(sorted(Counter(f.kind for f in flags).items()))
    if unplaced:
        out["open_flags_without_record"] = int(unplaced)   # e.g. quarantined rows of unknown IDs
    taken = [b for b in batches if b.outcome != Outcome.REFUSED]
    if batches:
        last = batches[-1]
        out["last_batch"] = {"id": last.id, "file": last.file_name, "operator": last.operator,
                             "received": last.received, "outcome": last.outcome, "rows": last.n_rows,
                             "stored": last.n_stored}
    out["batches"] = {"stored": len(taken), "refused": len(batches) - len(taken)}
    if not frame.empty:
        out["latest"] = _latest_gradients(frame, protocol, fitness, bootstrap, seed, progress)
    return out


def _cells(frame, protocol, flags, measures) -> tuple[list[dict], int]:
    """Per season and site: individuals, how many have each fitness measure, open flags; and the number
    of open flags that belong to no record (no season and site to place them in)."""
    from fieldslope.analysis.fitness import add_totals
    from fieldslope.tui.bridge import design_from_protocol

    season_col = protocol.season_col
    site_of_flag: dict = {}
    if not frame.empty:
        data = add_totals(frame, design_from_protocol(protocol))
        data = data.assign(_site=_site_of(data, protocol) if protocol.groups else ALL)
        site_of_flag = dict(zip(zip(data[protocol.id_col].astype(str), data[season_col].astype(str)),
                                data["_site"]))
    flag_cells = Counter((f.season, site_of_flag.get((f.individual, f.season), "")) for f in flags)
    cells = []
    if not frame.empty:
        for (season, site), cell in data.groupby([data[season_col].astype(str), "_site"], sort=True):
            cells.append({
                "season": season, "site": site, "n": int(len(cell)),
                "measured": {m: int(cell[m].notna().sum()) for m in measures if m in cell.columns},
                "open_flags": int(flag_cells.get((season, site), 0))})
    return cells, sum(n for (season, site), n in flag_cells.items() if site == "")


def _latest_gradients(frame, protocol, fitness: str, bootstrap: int, seed, progress) -> dict:
    """The latest season's pooled gradients (one cell's own where there is one cell) with their notes."""
    from fieldslope.tui.bridge import estimates_for_frame

    season_col = protocol.season_col
    latest = sorted(frame[season_col].dropna().astype(str).unique())[-1]
    one = frame[frame[season_col].astype(str) == latest].reset_index(drop=True)
    # the latest season alone: its resamples depend only on the seed and the season's own rows,
    # so these are the very numbers of the full estimates table (a test checks it); one fitness
    # measure computed (the same numbers as with all)
    est = estimates_for_frame(one, protocol, bootstrap=bootstrap, seed=seed, progress=progress, fitness=fitness,
                              generalized=False)
    t = est.table
    t = t[(t["season"] == latest) & (t["site"] == ALL) & (t["fitness"] == fitness) & (t["quantity"] == Q.GRADIENT)]
    if t.empty:    # one cell only: its own rows are the season's estimate
        t = est.table
        sites = sorted(set(t["site"]))
        t = t[(t["season"] == latest) & (t["fitness"] == fitness) & (t["quantity"] == Q.GRADIENT)
              & (t["site"] == (sites[0] if len(sites) == 1 else ALL))]
    rows = []
    for r in t.itertuples(index=False):
        lo, hi = finite_or_none(r.ci_low), finite_or_none(r.ci_high)
        rows.append({"trait": r.term, "estimate": finite_or_none(r.estimate), "se": finite_or_none(r.se), "ci_low": lo,
                     "ci_high": hi, "p_value": finite_or_none(r.p_value), "n": None if r.n is None or r.n != r.n else int(r.n),
                     "excludes_zero": bool(lo is not None and hi is not None and (lo > 0 or hi < 0))})
    notes = [n.message for n in est.notes if n.season in (latest, ALL, "") and n.fitness in (fitness, "")
             and n.site in (ALL, "") and n.quantity in (Q.GRADIENT, "")]
    return {"season": latest, "site": rows and t["site"].iloc[0] or ALL, "fitness": fitness,
            "quantity": Q.GRADIENT, "bootstrap": bootstrap, "rows": rows, "notes": notes}


def finite_or_none(v):
    """A number for JSON: the value as a float, or None when it is missing or not finite."""
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _signed(v, width: int) -> str:
    return " " * width if v is None else f"{v:+.3f}".rjust(width)


def text(info: dict) -> str:
    """The summary as lines of at most 80 columns; every text from data passes through :func:`shown`."""
    from fieldslope.common.names import flag_label as kind_label

    cut = fmt.cut
    lines = [cut(shown(info["name"] or "study") + " · " + shown(info["study"]), WIDTH)]
    lines.append(cut("traits: " + ", ".join(shown(t) for t in info["traits"]), WIDTH))
    measures = info["fitness_measures"]
    if not info["cells"]:
        lines.append("no records yet; take in batch files with fieldslope import FILE.")
    else:
        # as many fitness columns as fit beside season, site, n and open flags
        room = max(0, (WIDTH - 7 - 19 - 7 - 6) // 10)
        cols = measures[:room]
        head = f"{'season':<6} {'site':<18} {'n':>6} " + "".join(f"{cut(m, 9):>10}" for m in cols) + f"{'flags':>6}"
        lines += ["", head]
        for c in info["cells"]:
            lines.append(f"{cut(shown(c['season']), 6):<6} {cut(shown(c['site']), 18):<18} {c['n']:>6} "
                         + "".join(f"{c['measured'].get(m, 0):>10}" for m in cols) + f"{c['open_flags']:>6}")
        if len(cols) < len(measures):
            lines.append(cut(f"(columns: individuals with each fitness value; {len(measures) - len(cols)} more "
                             "measures in --format json)", WIDTH))
        else:
            lines.append("(n individuals; then how many have each fitness value; open flags)")
    flags = info["open_flags"]
    total = sum(flags.values())
    lines.append("")
    lines.append(fmt.wrap(("open flags: " + ", ".join(f"{kind_label(k)} {n}" for k, n in flags.items())
                           + f" ({total} in all; fieldslope flags lists them)") if flags else "open flags: none",
                          indent=""))
    b = info["last_batch"]
    if b:
        when = str(b["received"]).replace("T", " ")[:16]
        lines.append(fmt.wrap(f"last batch: #{b['id']} {shown(b['file'])} ({b['outcome']}, {b['stored']} of "
                              f"{b['rows']} rows) by {shown(b['operator'])}, {when} UTC; "
                              f"{info['batches']['stored']} batches taken in, {info['batches']['refused']} refused",
                              indent=""))
    latest = info["latest"]
    if latest:
        where = "pooled over sites" if latest["site"] == ALL else f"site {shown(latest['site'])}"
        lines += ["", fmt.wrap(f"season {shown(latest['season'])}, {where}: β on relative {shown(latest['fitness'])} "
                               f"(w per sd; 95 % bootstrap interval and permutation p, {latest['bootstrap']} "
                               "resamples)", indent="")]
        lines.append(f"  {'trait':<18} {'β':>8} {'se':>7}   {'95 % interval':^18} {'p':>7} {'n':>6}")
        for r in latest["rows"]:
            interval = (f"{_signed(r['ci_low'], 7)} to {_signed(r['ci_high'], 7)}"
                        if r["ci_low"] is not None else " " * 18)
            se = "" if r["se"] is None else f"{r['se']:.3f}"
            mark = " *" if r["excludes_zero"] else ""
            n = "" if r["n"] is None else str(r["n"])
            lines.append(f"  {cut(shown(r['trait']), 18):<18} {_signed(r['estimate'], 8)} {se:>7}  {interval} "
                         f"{fmt.p_text(r['p_value']):>7} {n:>6}{mark}")
        if any(r["excludes_zero"] for r in latest["rows"]):
            lines.append("  * the interval excludes zero")
        if not latest["rows"]:
            lines.append("  no estimate (see the notes of fieldslope estimate)")
        for note in latest["notes"][:3]:
            lines.append(fmt.wrap(shown(note), indent="  "))
    return "\n".join(line.rstrip() for line in lines) + "\n"
