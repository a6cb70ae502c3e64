"""``fieldslope report``: a standards-following, self-contained HTML page whose numbers are the estimates
table's, whose pictures are valid SVG, and where text from data is shown as text."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from fieldslope.tui.cli import main

HOSTILE = "<img src=x onerror=alert(1)>"
REPO = Path(__file__).resolve().parents[1]


def call(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """A two-season, two-site study (invented data) with a hostile ID, and its report (100 resamples)."""
    import numpy as np

    from tests.conftest import PROTOCOL_TEXT

    root = tmp_path_factory.mktemp("report")
    (root / "protocol.toml").write_text(PROTOCOL_TEXT, encoding="utf-8")
    study = str(root / "st")
    assert main(["init", study, "--protocol", str(root / "protocol.toml")]) == 0
    rng = np.random.default_rng(4)
    lines = ["tag,season,site,wing,tibia,survived,clutch"]
    for season in ("2023", "2024"):
        for site in ("Gull Flat", "Reed Bend"):
            for i in range(50):
                wing = rng.normal(4.5, 0.4)
                tibia = rng.normal(1.7, 0.15)
                alive = int(rng.random() < 1 / (1 + np.exp(-2 * (wing - 4.5))))
                clutch = int(rng.poisson(3)) if alive else 0
                lines.append(f"{site[:2]}{season}-{i},{season},{site},{wing:.3f},{tibia:.3f},{alive},{clutch}")
    (root / "a.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert main(["import", str(root / "a.csv"), "--study", study, "--operator", "ana"]) == 0
    (root / "b.csv").write_text("tag,season,site,wing,tibia,survived,clutch\n"
                                f"{HOSTILE},2024,Gull Flat,9.5,1.7,1,2\n", encoding="utf-8")
    assert main(["import", str(root / "b.csv"), "--study", study, "--operator", "<b>bo</b>"]) == 0
    out = root / "r.html"
    assert main(["report", "--study", study, "--output", str(out), "--bootstrap", "100", "--since", "1",
                 "--figures", str(root / "figs")]) == 0
    return root, study, out


def test_the_page_parses_strictly_and_has_every_section(made):
    import html5lib

    _, _, out = made
    text = out.read_text(encoding="utf-8")
    # html5lib follows the WHATWG HTML standard; strict=True raises on any parse error
    doc = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(text)
    heads = [h.text for h in doc.iter("h2")]
    assert heads == ["The study", "Selection by season and site", "Fitness functions", "Fitness surfaces",
                     "Across seasons", "Response to selection", "What changed", "Conventions and sources",
                     "Cautions"]
    cautions = " ".join("".join(p.itertext()) for p in doc.iter("p") if p.get("class") == "caution")
    assert "Associations, not causes" in cautions and "permits" in cautions
    assert "@media print" in text
    # self-contained: nothing is fetched (namespace names inside the SVG are not fetches)
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", text)
    assert "url(http" not in text and "@import" not in text
    assert "Schluter 1988" in text


def test_report_numbers_are_the_estimates_tables(made, capsys):
    import html5lib

    _, study, out = made
    code, raw, err = call(capsys, "estimate", "--format", "json", "--bootstrap", "100", "--study", study)
    assert code == 0, err
    table = {"|".join(str(r[k]) for k in ("season", "site", "fitness", "quantity", "term")): r for r in json.loads(raw)}
    doc = html5lib.parse(out.read_text(encoding="utf-8"), namespaceHTMLElements=False)
    rows = [tr for tr in doc.iter("tr") if tr.get("data-key")]
    assert len(rows) > 100
    quantities = set()
    for tr in rows:
        ref = table[tr.get("data-key")]
        quantities.add(ref["quantity"])
        cells = ["".join(td.itertext()) for td in tr.iter("td")]
        if ref["estimate"] is None:
            assert tr.get("data-value") == "" and cells[2] == ""
            continue
        assert float(tr.get("data-value")) == ref["estimate"]
        assert cells[2] == f"{ref['estimate']:.4g}"
        if ref["ci_low"] is not None:
            assert cells[4] == f"{ref['ci_low']:.4g} to {ref['ci_high']:.4g}"
        if ref["p_value"] is not None:
            assert cells[5] == ("<0.001" if ref["p_value"] < 0.001 else f"{ref['p_value']:.3f}")
        assert cells[6] == ("" if ref["n"] is None else str(ref["n"]))
    assert {"differential", "differential_std", "gradient", "quadratic", "correlational", "canonical",
            "gradient_mean", "gradient_tau2"} <= quantities


def test_every_picture_is_valid_svg(made):
    from defusedxml import ElementTree

    root, _, out = made
    text = out.read_text(encoding="utf-8")
    inline = re.findall(r"<svg\b.*?</svg>", text, flags=re.S)
    files = sorted((root / "figs").glob("*.svg"))
    # intake, 2 seasons × 2 traits fitness functions, 2 surfaces, 1 forest plot
    assert len(inline) == len(files) == 8
    for svg in [*inline, *(f.read_text(encoding="utf-8") for f in files)]:
        element = ElementTree.fromstring(svg.encode("utf-8"))
        assert element.tag == "{http://www.w3.org/2000/svg}svg"
    assert len(list((root / "figs").glob("*.png"))) == 8
    assert all(f.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for f in (root / "figs").glob("*.png"))


def test_text_from_data_is_shown_as_text(made):
    import html5lib

    _, _, out = made
    text = out.read_text(encoding="utf-8")
    assert HOSTILE not in text and "<b>bo</b>" not in text
    doc = html5lib.parse(text, namespaceHTMLElements=False)
    assert not list(doc.iter("img"))
    assert all("".join(b.itertext()) != "bo" for b in doc.iter("b"))
    assert not any("onerror" in el.attrib for el in doc.iter())
    body = "".join(doc.find("body").itertext())
    assert HOSTILE in body and "<b>bo</b>" in body


def test_bad_choices_are_one_line(made, capsys, tmp_path):
    _, study, _ = made
    code, _, err = call(capsys, "report", "--study", study, "--output", str(tmp_path / "x.html"), "--season", "1999")
    assert code == 1 and "no season '1999'" in err and len(err.strip().splitlines()) == 1
    code, _, err = call(capsys, "report", "--study", study, "--output", str(tmp_path / "no" / "x.html"),
                        "--bootstrap", "0")
    assert code == 1 and "cannot write" in err and len(err.strip().splitlines()) == 1


def test_help_and_other_commands_do_not_load_matplotlib():
    code = ("import sys; from fieldslope.tui.cli import build_parser; build_parser().format_help(); "
            "import fieldslope.tui.report, fieldslope.tui.summary, fieldslope.tui.changes; "
            "sys.exit(1 if 'matplotlib' in sys.modules else 0)")
    r = subprocess.run([sys.executable, "-c", code], env={**os.environ, "PYTHONPATH": str(REPO)},
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr


CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)


@pytest.mark.skipif(CHROMIUM is None, reason="no headless Chromium on this machine")
def test_a_browser_renders_the_page(made, tmp_path):
    from PIL import Image

    _, _, out = made
    shot = tmp_path / "shot.png"
    subprocess.run([CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--window-size=1000,1400",
                    f"--screenshot={shot}", out.as_uri()], capture_output=True, timeout=120)
    image = Image.open(shot).convert("L")
    lo, hi = image.getextrema()
    assert hi - lo > 100                               # not blank: dark text on a light page
    assert sum(image.histogram()[:128]) > 2000          # many dark pixels: text and pictures drawn


def test_a_tiny_p_value_is_escaped_text():
    import html5lib

    from fieldslope.tui.report import _row

    row = type("Row", (), dict(season="2024", site="all", fitness="total", quantity="gradient_q", term="wing",
                               estimate=12.5, se=float("nan"), ci_low=None, ci_high=None, p_value=0.0002, n=80))()
    page = f"<!DOCTYPE html><html><head><title>t</title></head><body><table>{_row(row)}</table></body></html>"
    doc = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(page)
    cells = ["".join(td.itertext()) for td in doc.iter("td")]
    assert cells[5] == "<0.001"
