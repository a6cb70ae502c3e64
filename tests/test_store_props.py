"""Property tests: any bytes through ``fieldslope import``; import / correct / exclude keep the raw
data and the audit trail intact."""

from __future__ import annotations

import contextlib
import io
import math
import sqlite3
import tempfile
from pathlib import Path

import hypothesis.strategies as st
from hypothesis import HealthCheck, given, settings
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, precondition, rule

from conftest import PROTOCOL_TEXT
from fieldslope.schemas.study import Study
from fieldslope.tui.cli import main

RAW_TABLES = ("batches", "records", "quarantine", "flags", "resolutions", "heritability")


def dump(db: Path) -> dict[str, list]:
    conn = sqlite3.connect(db)
    try:
        return {t: conn.execute(f"SELECT * FROM {t} ORDER BY id").fetchall() for t in RAW_TABLES}
    finally:
        conn.close()


def run_cli(*args: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


sheet_like = st.builds(
    lambda head, body: head + body,
    st.sampled_from([b"tag,season,site,wing\n", b"tag;season;wing\n", b"\xef\xbb\xbftag,season,clutch\n",
                     b"tag\tseason\tsurvived\n", b"PK\x03\x04", b""]),
    st.binary(max_size=300) | st.text(max_size=200).map(lambda t: t.encode("utf-8")))


def test_any_bytes_are_stored_or_refused_never_a_traceback(tmp_path, protocol_file):
    study = Study.create(tmp_path / "st", protocol_file)
    study.store.import_bytes("seed.csv", b"tag,season,site,wing\nQ1,2024,Gull Flat,4.5\n")
    study.close()
    target = tmp_path / "drop.csv"

    @settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(st.binary(max_size=400) | sheet_like)
    def check(data: bytes):
        before = dump(study.db_path)
        target.write_bytes(data)
        code, out, err = run_cli("import", str(target), "--study", str(study.root))
        assert "Traceback" not in out + err
        after = dump(study.db_path)
        new = after["batches"][len(before["batches"]):]
        assert after["batches"][:len(before["batches"])] == before["batches"]
        if code == 1:
            assert len(err.strip().splitlines()) == 1 and err.startswith("fieldslope: ")
            assert len(new) == 1 and new[0][8] == "refused" and new[0][3] == data
            assert {t: after[t] for t in RAW_TABLES if t != "batches"} == \
                {t: before[t] for t in RAW_TABLES if t != "batches"}
        else:
            assert code == 0
            if new:   # a readable, valid sheet: every row stored
                assert new[0][8] == "stored"
                assert len(after["records"]) - len(before["records"]) == new[0][9] == new[0][10]
            else:     # the same bytes as an earlier stored batch
                assert after == before and "already taken in" in out

    check()


def naive_effective(store, without_open_outliers: bool) -> dict:
    """The effective data computed the slow, obvious way from the raw tables (a reference for the
    vectorized ``effective_frame``): per individual, season and field, walk the events in order."""
    p, fields = store.protocol, store.fields
    names = [*p.groups, *p.trait_names, *p.component_names, *p.parent_cols]
    conn = sqlite3.connect(store.path)
    try:
        cols = ", ".join(fields[n].col for n in names)
        records = conn.execute(f"SELECT id, individual, season, seq_batch, {cols} FROM records ORDER BY id").fetchall()
        flags = conn.execute("SELECT id, kind, individual, season, field, record_id, quarantine_id FROM flags").fetchall()
        resolutions = conn.execute("SELECT id, flag_id, action, new, after_batch FROM resolutions ORDER BY id").fetchall()
    finally:
        conn.close()
    status = {f[0]: "open" for f in flags}
    for _, flag_id, action, _, _ in resolutions:
        status[flag_id] = action
    by_id = {f[0]: f for f in flags}
    skipped = {f[5] for f in flags if f[6] is None and status[f[0]] == "exclude" and f[4] in ("", p.id_col, p.season_col)}
    events: dict = {}
    for rec in records:
        if rec[0] in skipped:
            continue
        slot = events.setdefault((rec[1], rec[2]), {n: [] for n in names})
        for n, v in zip(names, rec[4:]):
            if v is not None:
                slot[n].append((rec[3], rec[0], rec[0], v))        # (batch order, tie-break, source, value)
    for rid, flag_id, action, new, after in resolutions:
        f = by_id[flag_id]
        if action != "set" or f[6] is not None or f[4] not in names:
            continue
        slot = events.setdefault((f[2], f[3]), {n: [] for n in names})
        value = float(new) if fields[f[4]].kind == "number" else new
        slot[f[4]].append((after + 0.5, rid, -flag_id, value))
    out = {}
    for key, slot in events.items():
        row = {}
        for n, evs in slot.items():
            if not evs:
                row[n] = None
                continue
            _, _, src, value = max(evs, key=lambda e: (e[0], e[1]))     # the last event in batch order
            row[n] = (value, src)
        out[key] = row
    for f in flags:
        fid, kind, ind, season, field, record_id, qid = f
        leave = status[fid] == "exclude" or (status[fid] == "open" and (
            kind == "out_of_range" or (kind == "outlier" and without_open_outliers)))
        if qid is not None or not leave or field not in names or (ind, season) not in out:
            continue
        cur = out[(ind, season)][field]
        if cur is not None and cur[1] in (record_id, -fid):
            out[(ind, season)][field] = None
    return {k: {n: (None if v is None else v[0]) for n, v in row.items()} for k, row in out.items()}


class ImportCorrectExclude(RuleBasedStateMachine):
    """Random imports, corrections, exclusions and keeps: earlier rows never change or vanish,
    every stored batch keeps all its rows, and the effective data only holds recorded or set values."""

    @initialize()
    def setup(self):
        self.dir = Path(tempfile.mkdtemp(prefix="fs-state-"))
        proto = self.dir / "p.toml"
        proto.write_text(PROTOCOL_TEXT)
        self.study = Study.create(self.dir / "st", proto)
        self.seen = dump(self.study.db_path)
        self.values: set[float] = set()
        self.n = 0

    def teardown(self):
        if hasattr(self, "study"):
            self.study.close()

    @rule(ids=st.lists(st.integers(0, 6), min_size=1, max_size=5),
          wings=st.lists(st.floats(2.0, 7.0).map(lambda x: round(x, 2)), min_size=5, max_size=5),
          bad=st.booleans(), accept=st.booleans())
    def import_batch(self, ids, wings, bad, accept):
        self.n += 1
        lines = ["tag,season,site,wing,survived"]
        for k, i in enumerate(ids):
            wing = "oops" if bad and k == 0 else f"{wings[k]}"
            lines.append(f"S{i},2024,{'Gull Flat' if i % 2 else 'Reed Bend'},{wing},{(i + self.n) % 2}")
        lines.append(f"batch-{self.n},2024,Gull Flat,4.5,1")   # unique row so bytes differ
        res = self.study.store.import_bytes(f"b{self.n}.csv", ("\n".join(lines) + "\n").encode(),
                                            accept_valid=accept)
        if res.outcome in ("stored", "partial"):
            assert res.n_stored + res.n_quarantined == res.n_rows
            self.values.update(wings)
            self.values.add(4.5)
        else:
            assert res.outcome == "refused" and bad and not accept

    @precondition(lambda self: hasattr(self, "study"))
    @rule(pick=st.integers(0, 50), action=st.sampled_from(["keep", "exclude", "set"]),
          value=st.floats(3.0, 6.0).map(lambda x: round(x, 2)))
    def resolve(self, pick, action, value):
        flags = [f for f in self.study.store.flags(include_resolved=True)
                 if f.field == "wing" or action != "set"]
        if not flags:
            return
        flag = flags[pick % len(flags)]
        try:
            self.study.store.resolve_flag(flag.id, action, value=str(value), reason="state test")
        except Exception as exc:  # only the documented refusals
            from fieldslope.schemas.store_types import RecordError
            assert isinstance(exc, RecordError), exc
            return
        if action == "set":
            self.values.add(value)

    @precondition(lambda self: hasattr(self, "study"))
    @rule(sensitivity=st.booleans())
    def export(self, sensitivity):
        import csv

        from fieldslope.schemas.export import frame_to_safe_csv

        frame = self.study.store.effective_frame(without_open_outliers=sensitivity)
        rows = list(csv.reader(io.StringIO(frame_to_safe_csv(frame))))
        assert rows[0] == list(frame.columns) and len(rows) == len(frame) + 1

    @invariant()
    def raw_and_audit_intact(self):
        if not hasattr(self, "study"):
            return
        now = dump(self.study.db_path)
        for table in RAW_TABLES:
            assert now[table][:len(self.seen[table])] == self.seen[table], table
        self.seen = now
        conn = sqlite3.connect(self.study.db_path)
        try:
            counts = dict(conn.execute("SELECT batch_id, count(*) FROM records WHERE correction_id IS NULL "
                                       "GROUP BY batch_id").fetchall())
            stored = dict(conn.execute("SELECT id, n_stored FROM batches WHERE outcome <> 'refused' "
                                       "AND n_stored > 0").fetchall())
            assert counts == stored
            assert conn.execute("SELECT count(*) FROM resolutions WHERE trim(reason) = '' OR operator = ''"
                                ).fetchone()[0] == 0
        finally:
            conn.close()
        for sensitivity in (False, True):
            frame = self.study.store.effective_frame(without_open_outliers=sensitivity)
            for v in frame["wing"]:
                assert math.isnan(v) or round(v, 2) in self.values
            expected = naive_effective(self.study.store, sensitivity)
            got = {(r["tag"], r["season"]): {n: (None if isinstance(r[n], float) and math.isnan(r[n])
                                                 or r[n] is None else r[n]) for n in frame.columns[2:]}
                   for r in frame.to_dict("records")}
            assert got == expected


ImportCorrectExclude.TestCase.settings = settings(max_examples=25, stateful_step_count=12, deadline=None,
                                                  suppress_health_check=[HealthCheck.too_slow])
TestImportCorrectExclude = ImportCorrectExclude.TestCase
