"""A kept extreme value (1e200) stops only the estimates of its own cell, with a note; every other cell is
estimated as if it were alone.

References: the selection gradient is the OLS slope of relative fitness on standardized traits (Lande & Arnold
1983, Evolution 37:1210), checked here against statsmodels OLS; the selection differential is the covariance of
relative fitness and the trait (Robertson 1966; Price 1970, Nature 227:520), checked against numpy.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from fieldslope.tui.bridge import estimates_for_frame


@pytest.fixture
def frame(hopper_rows):
    rows = hopper_rows("2024", "Gull Flat", n=40, seed=5) + hopper_rows("2024", "Reed Bend", n=40, seed=6)
    f = pd.DataFrame(rows)
    for col in ("wing", "tibia", "survived", "clutch"):
        f[col] = f[col].astype(float)
    f["dam"] = f["sire"] = None
    return f


def _cell(table, site, fitness, quantity, term):
    hit = table[(table["site"] == site) & (table["fitness"] == fitness) & (table["quantity"] == quantity)
                & (table["term"] == term)]
    assert len(hit) == 1, (site, fitness, quantity, term)
    return float(hit["estimate"].iloc[0])


@pytest.mark.parametrize("value", [1e200, -1e200, 1e160, float("inf")])
@pytest.mark.parametrize("bootstrap", [0, 30])
def test_one_huge_trait_value_stops_only_its_own_cell(study, frame, value, bootstrap):
    frame.loc[3, "wing"] = value                          # a Gull Flat row
    est = estimates_for_frame(frame, study.protocol, bootstrap=bootstrap, seed=1)
    t = est.table
    notes = [n for n in est.notes if n.site == "Gull Flat" and "too large to compute with" in n.message]
    assert {n.fitness for n in notes} == {"survived", "clutch", "total"}
    assert all("wing" in n.message for n in notes)
    gull = t[t["site"] == "Gull Flat"]
    assert not ((gull["term"] == "wing") & gull["estimate"].notna()).any()
    assert np.isfinite(t["estimate"].dropna()).all()

    # Reed Bend: β is the OLS slope of relative fitness on standardized traits (Lande & Arnold 1983)
    reed = frame[frame["site"] == "Reed Bend"]
    w = reed["clutch"] / reed["clutch"].mean()
    x = (reed[["wing", "tibia"]] - reed[["wing", "tibia"]].mean()) / reed[["wing", "tibia"]].std(ddof=1)   # sd with n - 1, as the conventions say
    fit = sm.OLS(w.to_numpy(), sm.add_constant(x.to_numpy())).fit()
    assert _cell(t, "Reed Bend", "clutch", "gradient", "wing") == pytest.approx(fit.params[1], rel=1e-9)
    assert _cell(t, "Reed Bend", "clutch", "gradient", "tibia") == pytest.approx(fit.params[2], rel=1e-9)

    # Gull Flat keeps the estimates that do not use wing: S of tibia = cov(w, z) (Robertson-Price identity)
    gull_rows = frame[frame["site"] == "Gull Flat"]
    wg = gull_rows["clutch"] / gull_rows["clutch"].mean()
    expected = float(np.cov(wg, gull_rows["tibia"], ddof=0)[0, 1])
    assert _cell(t, "Gull Flat", "clutch", "differential", "tibia") == pytest.approx(expected, rel=1e-9)


def test_one_huge_fitness_value_stops_only_its_own_cell(study, frame):
    frame.loc[45, "clutch"] = 1e200                       # a Reed Bend row
    est = estimates_for_frame(frame, study.protocol, bootstrap=0)
    assert any(n.site == "Reed Bend" and n.fitness == "clutch" and "too large" in n.message for n in est.notes)
    t = est.table
    assert not ((t["site"] == "Reed Bend") & (t["fitness"] == "clutch") & t["estimate"].notna()).any()
    assert _cell(t, "Gull Flat", "clutch", "gradient", "wing") == pytest.approx(
        _cell(estimates_for_frame(frame[frame["site"] == "Gull Flat"], study.protocol, bootstrap=0).table,
              "Gull Flat", "clutch", "gradient", "wing"), rel=1e-12)


def test_a_kept_1e200_leaves_the_estimate_command_working(study, write_batch, hopper_rows, capsys):
    from fieldslope.tui.cli import main

    rows = hopper_rows("2024", "Gull Flat", n=30, seed=2) + hopper_rows("2024", "Reed Bend", n=30, seed=3)
    rows[4]["wing"] = "1e200"
    assert study.store.import_file(write_batch(rows), operator="t").outcome == "stored"
    for flag in study.store.flags():
        if flag.field == "wing" and study.store.flag(flag.id).is_open:   # keeping one settles its twin
            study.store.resolve_flag(flag.id, "keep", reason="checked on the slip", operator="t")
    code = main(["estimate", "--bootstrap", "0", "--skip-pedigree", "--study", str(study.root)])
    out = capsys.readouterr().out
    assert code == 0
    assert "season 2024 · site Reed Bend · fitness total" in out
    assert "wing holds a value too large to compute with (1e+200)" in " ".join(out.split())
