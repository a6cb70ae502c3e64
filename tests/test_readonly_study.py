"""A study folder this account can read but not write: every browsing command and the dashboard work, every
write is refused with one sentence.

The folder and its files are made read-only with chmod. Root ignores file modes (CAP_DAC_OVERRIDE), and these
tests often run as root, so the commands run in a child process whose capability bounding set no longer
holds CAP_DAC_OVERRIDE and CAP_DAC_READ_SEARCH (``prctl(PR_CAPBSET_DROP)`` before ``exec``): the kernel then
checks the file modes for it as for anyone. SQLite cannot make the ``-shm`` file it reads a WAL store
through in such a folder, so the store is opened ``immutable`` there; that is what is tested for real.
"""

from __future__ import annotations

import ctypes
import os
import stat
import subprocess
import sys
from pathlib import Path

import pytest

PR_CAPBSET_DROP, CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH = 24, 1, 2
ROOT = Path(__file__).resolve().parents[1]


def _without_override() -> None:
    if os.geteuid() != 0:
        return
    libc = ctypes.CDLL(None, use_errno=True)
    for cap in (CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH):
        if libc.prctl(PR_CAPBSET_DROP, cap, 0, 0, 0) != 0:
            raise OSError(ctypes.get_errno(), "prctl(PR_CAPBSET_DROP)")


def run_bound_by_modes(args: list[str], home: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "HOME": str(home), "XDG_STATE_HOME": str(home / "state"), "PYTHONPATH": str(ROOT)}
    return subprocess.run(args, preexec_fn=_without_override, capture_output=True, text=True, env=env,
                          cwd=ROOT, timeout=300)


def _chmod_tree(root: Path, folders: int, files: int) -> None:
    for path in [root, *root.rglob("*")]:
        os.chmod(path, folders if path.is_dir() else files)


@pytest.fixture
def locked(study, write_batch, hopper_rows, tmp_path):
    """A study with one batch and one open flag, then made read-only (0555 folders, 0444 files)."""
    rows = hopper_rows("2024", "Gull Flat", n=20, seed=8)
    rows[2]["wing"] = "45.1"                                       # out of range: one open flag
    batch = write_batch(rows, "day1.csv")
    assert study.store.import_file(batch, operator="ana").outcome == "stored"
    root = study.root
    study.close()
    assert not Path(f"{root}/fieldslope.sqlite-wal").exists()      # closed cleanly: no -wal, no -shm
    _chmod_tree(root, 0o555, 0o444)
    home = tmp_path / "home"
    home.mkdir()
    probe = run_bound_by_modes([sys.executable, "-c", f"open({str(root / 'protocol.toml')!r}, 'a')"], home)
    if probe.returncode == 0:
        _chmod_tree(root, 0o2770, 0o660)
        pytest.skip("file modes do not bind here (root without a way to drop CAP_DAC_OVERRIDE)")
    yield root, batch, home, rows[0]["tag"]
    _chmod_tree(root, 0o2770, 0o660)


def fieldslope(locked, *args):
    root, _, home, _ = locked
    return run_bound_by_modes([sys.executable, "-m", "fieldslope.tui.cli", *args, "--study", str(root)], home)


@pytest.mark.parametrize("command", [["flags"], ["batches"], ["history", "TAG"], ["summary", "--bootstrap", "0"],
                                     ["estimate", "--bootstrap", "0", "--skip-pedigree"], ["check", "BATCH"],
                                     ["changes"]])
def test_every_browsing_command_works_in_a_folder_this_account_cannot_write(locked, command):
    root, batch, _, tag = locked
    command = [tag if c == "TAG" else str(batch) if c == "BATCH" else c for c in command]
    done = fieldslope(locked, *command)
    assert done.returncode == 0, done.stderr
    assert "read-only for this account" not in done.stderr
    expected = {"flags": "out of range", "batches": "day1.csv", "history": "wing recorded",
                "summary": "Gull Flat", "estimate": "season 2024 · site Gull Flat", "check": "day1.csv",
                "changes": "day1.csv"}[command[0]]
    assert expected in done.stdout
    assert sorted(p.name for p in root.iterdir()) == ["fieldslope.sqlite", "intake", "protocol.toml"]


@pytest.mark.parametrize("command", [["import", "BATCH2"], ["resolve", "1", "--keep", "--reason", "on the slip"]])
def test_every_write_is_refused_with_one_sentence(locked, command, write_batch, hopper_rows):
    batch2 = write_batch(hopper_rows("2024", "Reed Bend", n=5, seed=9), "day2.csv")
    command = [str(batch2) if c == "BATCH2" else c for c in command]
    done = fieldslope(locked, *command)
    assert done.returncode == 1
    assert len(done.stderr.strip().splitlines()) == 1 and "read-only" in done.stderr and "unexpected" not in done.stderr


DASHBOARD = """
import asyncio, sys
from pathlib import Path
from tests.test_tui_screens import make_app, screen_text, wait_for

async def main(root):
    app = make_app(Path(root))
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(app, pilot, lambda: app.snapshot is not None and not app.updating, what="figures")
        print("READONLY", app.readonly, "ROWS", app.screen.query_one("#sel-linear").row_count)
        print("OPEN", screen_text(app))
        await pilot.press("2")
        await wait_for(app, pilot, lambda: app.screen.query("#flags-table") and app.screen.rows, what="flags")
        app.clear_notifications()
        await pilot.pause()
        print("BEFORE", screen_text(app))
        await pilot.press("k")
        await pilot.pause(0.3)
        print("KEEP", type(app.screen).__name__, [n.message for n in app._notifications])

asyncio.run(main(sys.argv[1]))
"""


def test_the_dashboard_opens_read_only_says_so_and_refuses_writes(locked):
    root, _, home, _ = locked
    done = run_bound_by_modes([sys.executable, "-c", DASHBOARD, str(root)], home)
    assert done.returncode == 0, done.stderr[-3000:]
    lines = {line.split(" ", 1)[0]: line for line in done.stdout.splitlines()}
    assert lines["READONLY"].startswith("READONLY True") and not lines["READONLY"].endswith("ROWS 0")
    assert "read-only" in lines["OPEN"]                                  # the note, and the status line
    assert "group write access" not in lines["BEFORE"]
    assert lines["KEEP"].startswith("KEEP FlagsScreen ")                 # no form opened ...
    assert "read-only for this account" in lines["KEEP"]                # ... but the sentence saying why
    assert stat.S_IMODE((root / "fieldslope.sqlite").stat().st_mode) == 0o444
