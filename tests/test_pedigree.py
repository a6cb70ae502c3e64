"""The pedigree: order, checks, summary, inbreeding and A^-1.

A^-1 is checked against the inverse of A built by the tabular method
(Emik & Terrill 1949, J. Anim. Sci. 8:606; as set out in Henderson 1976,
Biometrics 32:69-83), written here independently of the code under test.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from animal_sim import tabular_a
from fieldslope.analysis.pedigree import from_frame, summarize
from fieldslope.common.errors import PedigreeError


def frame(rows) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["id", "season", "dam", "sire"])


def check_against_tabular(ped):
    A = tabular_a(list(ped.dam), list(ped.sire))
    np.testing.assert_allclose(ped.a_inverse().toarray(), np.linalg.inv(A), atol=1e-10)
    np.testing.assert_allclose(ped.inbreeding, np.diag(A) - 1, atol=1e-12)
    assert ped.log_det_a() == pytest.approx(np.linalg.slogdet(A)[1], abs=1e-9)


def test_small_pedigree_with_inbreeding_matches_tabular_method():
    # 6 is the offspring of half-sibs' descendants; 8 of a full-sib mating; 9 of a parent-offspring mating
    rows = [("1", "1", "", ""), ("2", "1", "", ""), ("3", "2", "2", "1"), ("4", "2", "", "1"),
            ("5", "3", "3", "4"), ("6", "4", "2", "5"), ("7", "4", "2", "5"), ("8", "5", "7", "6"),
            ("9", "5", "7", "5")]
    ped = from_frame(frame(rows), "id", "season", "dam", "sire")
    check_against_tabular(ped)
    F = dict(zip(ped.ids, ped.inbreeding))
    # the classic six-animal example (Mrode 2005, Linear Models for the Prediction of Animal
    # Breeding Values, 2nd ed., ch. 2): F of animal 6 is 0.125 (from memory)
    assert F["6"] == pytest.approx(0.125)
    assert F["5"] == pytest.approx(0.125)  # sire 4 and dam 3 are half-sibs through 1


def test_random_inbred_pedigree_matches_tabular_method():
    rng = np.random.default_rng(7)
    rows, prev = [], [f"f{i}" for i in range(6)]
    rows += [(x, "0", "", "") for x in prev]
    for g in range(1, 7):  # a small closed population: inbreeding builds up
        kids = []
        for k in range(8):
            d, s = rng.choice(len(prev), 2, replace=False)
            dam = prev[d] if rng.random() > 0.1 else ""
            sire = prev[s] if rng.random() > 0.1 else ""
            kids.append((f"g{g}-{k}", str(g), dam, sire))
        rows += kids
        prev = [r[0] for r in kids]
    ped = from_frame(frame(rows), "id", "season", "dam", "sire")
    assert ped.inbreeding.max() > 0.1
    check_against_tabular(ped)
    # parents precede offspring
    for i in range(ped.n):
        assert ped.dam[i] < i and ped.sire[i] < i


def test_parents_named_but_never_recorded_are_founders_and_order_is_by_descent():
    rows = [("c", "2", "a", "b"), ("a", "3", "", ""), ("d", "4", "c", "x")]
    ped = from_frame(frame(rows), "id", "season", "dam", "sire")
    assert set(ped.ids) == {"a", "b", "c", "d", "x"}
    s = summarize(ped)
    assert (s.individuals, s.founders, s.max_depth) == (5, 3, 2)
    check_against_tabular(ped)
    # a is recorded in season 3 but is the dam of c, recorded in season 2
    assert any("later season" in p and "a of c" in p for p in ped.problems)


def test_own_ancestor_is_refused_in_one_sentence():
    rows = [("a", "1", "c", ""), ("b", "1", "a", ""), ("c", "1", "b", ""), ("z", "1", "", "")]
    with pytest.raises(PedigreeError) as err:
        from_frame(frame(rows), "id", "season", "dam", "sire")
    msg = str(err.value)
    assert "own ancestor" in msg and "a" in msg and "\n" not in msg
    with pytest.raises(PedigreeError, match="its own parent"):
        from_frame(frame([("a", "1", "a", "")]), "id", "season", "dam", "sire")


def test_dam_used_as_sire_and_conflicting_parents_are_named():
    rows = [("p", "1", "", ""), ("q", "1", "", ""), ("k1", "2", "p", "q"), ("k2", "2", "q", "p"),
            ("k1", "3", "q", "q")]
    ped = from_frame(frame(rows), "id", "season", "dam", "sire")
    text = " ".join(ped.problems)
    assert "both as a dam and as a sire" in text and "p, q" in text
    assert "different dams" in text and "k1" in text


def test_summary_counts_families():
    rows = [("d1", "1", "", ""), ("d2", "1", "", ""), ("s1", "1", "", ""), ("s2", "1", "", "")]
    rows += [(f"a{k}", "2", "d1", "s1") for k in range(3)]  # full-sib family
    rows += [("b0", "2", "d2", "s1")]  # s1 has a second mate: a half-sib family
    rows += [("c0", "2", "d2", "s2"), ("c1", "2", "d2", "s2")]  # second full-sib family; d2 has two mates
    s = summarize(from_frame(frame(rows), "id", "season", "dam", "sire"))
    assert (s.individuals, s.founders, s.full_sib_families, s.half_sib_families) == (10, 4, 2, 2)
    assert s.mean_inbreeding == 0.0 and s.max_depth == 1
