"""Fuzzing (Hypothesis): arbitrary Unicode, markup and control characters as IDs, sites, file names,
operator names and reasons, through import, flags, resolve, history, estimate and the dashboard.

Asserted each time: no exception (no "unexpected failure", no traceback), nothing parsed as markup (the
text comes back on screen as typed, escaped only for control characters), and no raw control character
in terminal output. Bounded: a few dozen examples on the command line, a few on the dashboard.
"""

from __future__ import annotations

import asyncio
import csv
import io
import os
import tempfile
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldslope.tui.cli import main
from fieldslope.tui.safe_text import escape_controls, has_raw_controls

from test_hostile_text import PROTOCOL
from test_tui_screens import make_app, ready, wait_for

# characters that break things: markup, controls of every kind, bidi overrides, odd whitespace
NASTY = "[]/@=\\\"',;\x00\x07\x08\t\n\r\x1b\x7f\x85\x9b\u2028\u2029\u202a\u202e\u2066\u2069\u200f\ufeff"
hostile = st.text(alphabet=st.one_of(st.sampled_from(NASTY), st.characters(exclude_categories=("Cs",))),
                  min_size=1, max_size=24)
markup = st.sampled_from(["[/]", "[@click=app.quit]", "[b]", "[red]x[/red]", "[link=file:///]"])
text = st.builds(lambda a, m, b: a + m + b, hostile, markup, hostile) | hostile


def _usable(value: str) -> str:
    """Cells and file names cannot hold NUL; a CSV cell cannot be only blanks (it would read as missing)."""
    value = value.replace("\x00", "")
    return value if value.strip() else value + "x"


def _file_name(value: str) -> str:
    name = "".join(ch for ch in value if ch not in "/\x00")[:40].strip() or "x"
    return name + ".csv"


def _cli(*args: str) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    text = out.getvalue() + err.getvalue()
    assert "unexpected failure" not in text and "Traceback" not in text, text
    assert not has_raw_controls(text), repr(text)
    return code, text


def _sheet(ids: list[str], site: str) -> bytes:
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["tag", "season", "site", "wing", "tibia", "survived"])
    for i, tag in enumerate(ids):
        w.writerow([tag, "2024", site, "45.1" if i == 0 else f"{4 + (i % 7) * 0.2:.1f}", f"{1.5 + (i % 5) * 0.1:.1f}",
                    i % 2])
    for i in range(12):
        w.writerow([f"H{i:02d}", "2024", site, f"{4 + (i % 5) * 0.3:.1f}", f"{1.4 + (i % 4) * 0.1:.1f}", (i + 1) % 2])
    return buf.getvalue().encode("utf-8")


def _study(folder: Path):
    from fieldslope.schemas.study import Study

    proto = folder / "proto.toml"
    proto.write_text(PROTOCOL, encoding="utf-8")
    return Study.create(folder / "study", proto)


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tag=text, site=text, name=text, operator=text, reason=text)
def test_command_line_takes_any_text_without_a_crash_or_a_raw_control(tag, site, name, operator, reason):
    tag, site, operator, reason = _usable(tag), _usable(site), _usable(operator), _usable(reason)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        _study(folder).close()
        root = str(folder / "study")
        path = folder / _file_name(name)
        path.write_bytes(_sheet([tag, tag + "2"], site))
        code, _ = _cli("--study", root, "check", str(path))
        # --option=VALUE: a value such as '-:' would otherwise be read as an option (a usage error, exit 2)
        code, out = _cli("--study", root, "import", str(path), f"--operator={operator}", "--accept-valid")
        assert code in (0, 1)
        code, out = _cli("--study", root, "flags")
        assert code == 0
        ids = [int(line.split()[0][1:]) for line in out.splitlines() if line.startswith("#")]
        if ids:
            code, _ = _cli("--study", root, "resolve", str(ids[0]), "--keep", f"--reason={reason}",
                           f"--operator={operator}")
        code, _ = _cli("--study", root, "flags", "--all")
        assert code == 0
        code, out = _cli("--study", root, "history", tag)
        if code == 0:
            assert out.startswith(escape_controls(tag) + ": ")
        _cli("--study", root, "estimate", "--bootstrap", "0")
        _cli("--study", root, "estimate", "--bootstrap", "0", f"--site={site}")


async def _walk_the_dashboard(root: Path, shown: list[str]) -> None:
    app = make_app(root)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: ready(app))
        for key in ("2", "1", "3", "4", "5", "2"):
            await pilot.press(key)
            await pilot.pause()
            for strip in app.screen._compositor.render_strips():
                assert not has_raw_controls(strip.text, allow_newlines=False), repr(strip.text)
        await pilot.press("c")                       # the correction form names the flagged ID
        await pilot.pause()
        await pilot.press("escape")
        await pilot.press("1", "c")                  # check the hostile file in the drop folder
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.is_running
        seen = " ".join(s.text for s in app.screen._compositor.render_strips())
        assert any(escape_controls(s)[:8] in seen for s in shown), (shown, seen)


@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tag=text, site=text, name=text)
def test_dashboard_shows_any_text_literally_on_every_screen(tag, site, name):
    tag, site = _usable(tag), _usable(site)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        study = _study(folder)
        try:
            study.store.import_bytes("first.csv", _sheet([tag], site), operator="t", accept_valid=True)
            (study.intake_dir / _file_name(name)).write_bytes(_sheet([tag + "b"], site))
            old = os.stat(study.intake_dir / _file_name(name)).st_mtime - 10   # settled: listed as new at once
            os.utime(study.intake_dir / _file_name(name), (old, old))
        finally:
            study.close()
        asyncio.run(_walk_the_dashboard(folder / "study", [tag, site, _file_name(name)]))
