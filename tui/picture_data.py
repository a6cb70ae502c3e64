"""Data for the Selection pictures, taken from a snapshot with the estimators' own helpers.

Relative fitness and standardized traits come from ``analysis.fitness`` and
``analysis.standardize`` (the same functions the estimates use); pooled cells
are relativized and standardized within each site first, as the estimates are.
"""

from __future__ import annotations

from fieldslope.tui.snapshot import ALL, Snapshot


def scatter_data(snap: Snapshot, season: str, site: str, fitness: str, trait: str, nbins: int = 9):
    """(x, w, bins): standardized ``trait``, relative fitness, and (bin centre, mean w) pairs.

    Bins are equal-width steps of 0.5 sd from −2.25 to +2.25 sd; a bin with
    fewer than 3 individuals is not drawn.
    """
    import numpy as np

    from fieldslope.analysis.fitness import add_totals, relative
    from fieldslope.analysis.standardize import standardize
    from fieldslope.tui.bridge import design_from_protocol

    frame = snap.cell_frame(season, site)
    if frame is None or frame.empty or trait not in frame.columns:
        return [], [], []
    design = design_from_protocol(snap.protocol)
    if fitness in design.totals:
        frame = add_totals(frame, design)
    if fitness not in frame.columns:
        return [], [], []
    cols = list(snap.protocol.groups)
    groups = [frame] if site != ALL or not cols else [g for _, g in frame.groupby(cols)]
    xs, ws = [], []
    for g in groups:
        z = g[trait].to_numpy(dtype=float)
        W = g[fitness].to_numpy(dtype=float)
        ok = np.isfinite(z) & np.isfinite(W)
        if ok.sum() < 3 or W[ok].mean() <= 0 or np.ptp(z[ok]) == 0:
            continue
        x, _, _ = standardize(z[ok].reshape(-1, 1))
        xs.append(x[:, 0])
        ws.append(relative(W[ok]))
    if not xs:
        return [], [], []
    x, w = np.concatenate(xs), np.concatenate(ws)
    width = 4.5 / nbins
    bins = []
    for k in range(nbins):
        lo = -2.25 + k * width
        inside = (x >= lo) & (x < lo + width)
        if inside.sum() >= 3:
            bins.append((lo + width / 2, float(w[inside].mean())))
    return x.tolist(), w.tolist(), bins
