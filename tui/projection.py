"""Text for the projection over generations and the sample-size plan, from the analysis helpers."""

from __future__ import annotations

from textual.content import Content

from fieldslope.common.names import Q
from fieldslope.tui.widgets.literal import assemble
from fieldslope.tui.snapshot import Snapshot
from fieldslope.tui.widgets.pictures import fmt


def _number(text: str, kind=float):
    try:
        return kind(text)
    except (TypeError, ValueError):
        return None


def projection_text(snap: Snapshot, season: str, site: str, fitness: str, trait: str,
                    k_text: str, target_text: str, response: float | None = None) -> Content:
    """The mean carried over k generations of response R, and the generations needed for a target change.

    ``response`` replaces the table's R (the Response screen passes R = h²S with the pedigree h²)."""
    from fieldslope.analysis.response import generations_needed, project_mean

    r = snap.value(season, site, fitness, Q.RESPONSE, trait) if response is None else {"estimate": response}
    mean = snap.value(season, site, fitness, Q.MEAN, trait)
    if r is None or r["estimate"] is None:
        return assemble((f"No response for {trait} here: it needs h² (press h) and S.", "$text-muted"))
    unit = snap.protocol.traits[trait].unit if trait in snap.protocol.traits else ""
    lines = [assemble((f"{trait}: ", "bold"), "R = ", (f"{fmt(r['estimate'])} {unit}", "bold"),
                              " per generation", ("  (constant selection and h² assumed)", "$text-muted"))]
    k = _number(k_text, int)
    if k is not None and 0 < k <= 10000 and mean is not None and mean["estimate"] is not None:
        path = project_mean(mean["estimate"], r["estimate"], k)
        lines.append(assemble(f"after {k} generations the mean goes from {fmt(path[0])} to ",
                                      (f"{fmt(float(path[-1]))} {unit}", "bold")))
    elif k_text and k is None:
        lines.append(Content("Type a whole number of generations, e.g. 10.", ))
    target = _number(target_text)
    if target is not None:
        g = generations_needed(target, r["estimate"])
        lines.append(assemble(f"a change of {fmt(target)} {unit} takes ",
                                      ("never at this R (other sign, or 0)" if g is None else f"{g} generations",
                                       "bold")))
    return Content("\n").join(lines)


def sample_size_text(last: dict, width_text: str, n_traits: int) -> Content:
    """Individuals needed for a 95 % interval of the chosen width for this β.

    The residual variance × VIF the planning helper needs is taken from the
    latest batch's OLS standard error: se² = σ²·VIF / (n − p − 1).
    """
    from fieldslope.analysis.planning import individuals_for_gradient

    width = _number(width_text)
    if width is None or width <= 0:
        return Content("Type the total interval width you want (in units of β, e.g. 0.2).")
    se, n = last.get("se"), last.get("n")
    if se is None or not se > 0 or not n or n <= n_traits + 1:
        return Content("The latest batch gives no standard error for this β yet.")
    scaled = se * se * (int(n) - n_traits - 1)
    need = individuals_for_gradient(width / 2, scaled, 1.0, n_traits)
    return assemble(f"A 95 % interval {fmt(width)} wide needs about ", (f"{need}", "bold"),
                            f" individuals (now {int(n)}: width {fmt(2 * 1.96 * se)}).")
