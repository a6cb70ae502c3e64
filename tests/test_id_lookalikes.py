"""IDs: a new ID that reads like one on record (case, spaces, O/0, l/1/I, S/5 ...) is flagged and names the
ID on record; the protocol may declare an ID pattern and the plausible seasons.

Which characters are read for one another (O/0, I/l/1, S/5, Z/2, B/8, G/6) is common practice of field
sheets and handwritten tags, not a published list."""

from __future__ import annotations

import pytest

from fieldslope.common.errors import ProtocolError
from fieldslope.common.names import FLAG_KINDS, Kind, flag_label
from fieldslope.schemas.id_checks import how_they_differ, id_key
from fieldslope.schemas.protocol import parse_protocol
from fieldslope.tui.cli import main

HEADER = "tag,season,site,wing,tibia,survived,clutch"
FIRST = HEADER + "\n" + "".join(f"GF24-{i:04d},2024,Gull Flat,4.{i % 9 + 1},1.5,1,2\n" for i in range(1, 9))


def call(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("new, old, how", [
    ("gf24-0001", "GF24-0001", "case"),
    ("GF24-O001", "GF24-0001", "look-alike characters (O for 0)"),
    ("GF24-000l", "GF24-0001", "look-alike characters (l for 1)"),
    ("GF24-000I", "GF24-0001", "look-alike characters (I for 1)"),
    ("GF24-OO05", "GF24-0005", "look-alike characters (O for 0)"),
    ("GF24-000S", "GF24-0005", "look-alike characters (S for 5)"),
    ("GF24 0001", "GF24-0001", "spaces or separators"),
])
def test_ids_that_read_alike_share_a_key_and_say_how_they_differ(new, old, how):
    assert id_key(new) == id_key(old)
    assert how_they_differ(new, old) == how


def test_different_ids_keep_different_keys():
    assert id_key("GF24-0001") != id_key("GF24-0007")
    assert id_key("GF24-0001") != id_key("GF25-0001")


def test_a_lookalike_id_is_flagged_naming_the_id_on_record(tmp_path, protocol_file, capsys, study):
    study.store.import_bytes("first.csv", FIRST.encode(), operator="ana")
    later = (HEADER + "\nGF24-O003,2025,Gull Flat,4.5,1.5,1,2\ngf24-0004,2025,Gull Flat,4.6,1.6,1,2\n"
             "GF24-0099,2025,Gull Flat,4.4,1.5,1,2\n")
    result = study.store.import_bytes("later.csv", later.encode(), operator="ana")
    alike = [f for f in result.flags if f.kind == Kind.LOOKALIKE_ID]
    assert [(f.row, f.individual) for f in alike] == [(2, "GF24-O003"), (3, "gf24-0004")]
    assert "'GF24-0003' is on record" in alike[0].message and "O for 0" in alike[0].message
    assert "'GF24-0004' is on record" in alike[1].message and "only in case" in alike[1].message
    # stored, with an open flag: never silently a new individual
    stored = {f.individual for f in study.store.flags() if f.kind == Kind.LOOKALIKE_ID}
    assert stored == {"GF24-O003", "gf24-0004"}
    assert "GF24-O003" in set(study.store.effective_frame()["tag"])


def test_two_new_ids_of_one_batch_that_read_alike_name_each_other(study):
    batch = HEADER + "\nRB24-0010,2024,Reed Bend,4.5,1.5,1,2\nRB24-001O,2024,Reed Bend,4.6,1.6,1,2\n"
    result = study.store.check_bytes("new.csv", batch.encode())
    alike = sorted((f.individual, f.message) for f in result.flags if f.kind == Kind.LOOKALIKE_ID)
    assert [a for a, _ in alike] == ["RB24-0010", "RB24-001O"]
    assert "'RB24-001O' is also in this batch" in alike[0][1]


def test_a_census_row_for_a_lookalike_id_names_the_id_on_record(study):
    study.store.import_bytes("first.csv", FIRST.encode(), operator="ana")
    census = "tag,season,survived\nGF24-0002,2024,1\nGF24-OOO2,2024,0\n"
    result = study.store.check_bytes("census.csv", census.encode())
    (error,) = result.errors
    assert error.row == 3 and "'GF24-0002' is, differing only in look-alike characters (O for 0)" in error.reason


def test_the_flag_kinds_have_plain_word_labels():
    for kind in (Kind.LOOKALIKE_ID, Kind.ID_PATTERN, Kind.SEASON_RANGE):
        assert kind in FLAG_KINDS and "_" not in flag_label(kind)


# -- the protocol's ID pattern and seasons ------------------------------------------------------------

def test_protocol_id_pattern_and_seasons_flag_values_outside(tmp_path, protocol_text, capsys):
    text = protocol_text.replace('missing = ["NA"]',
                                 'missing = ["NA"]\nid_pattern = "[A-Z]{2}[0-9]{2}-[0-9]{4}"\nseasons = [2020, 2030]')
    protocol = tmp_path / "p.toml"
    protocol.write_text(text)
    study = str(tmp_path / "st")
    assert call(capsys, "init", study, "--protocol", str(protocol))[0] == 0
    sheet = tmp_path / "b.csv"
    sheet.write_text(HEADER + "\nGF24-0001,2024,Gull Flat,4.5,1.5,1,2\nGF24-01,2024,Gull Flat,4.5,1.5,1,2\n"
                     "GF24-0003,2042,Gull Flat,4.5,1.5,1,2\n")
    code, out, _ = call(capsys, "check", str(sheet), "--study", study)
    assert code == 0 and "1 ID off pattern, 1 season off range" in out
    assert "row 3: ID 'GF24-01' does not match the protocol's ID pattern" in out
    assert "row 4: season 2042 of GF24-0003 is outside the protocol's seasons 2020–2030" in out


@pytest.mark.parametrize("line, key", [
    ('id_pattern = "[A-Z"', "checks.id_pattern"),
    ("seasons = [2030, 2020]", "checks.seasons"),
    ('seasons = ["2020", 2030]', "checks.seasons"),
    ("seasons = [2020]", "checks.seasons"),
])
def test_a_bad_id_pattern_or_season_range_is_one_sentence_naming_the_key_and_line(protocol_text, line, key):
    text = protocol_text.replace('missing = ["NA"]', f'missing = ["NA"]\n{line}')
    with pytest.raises(ProtocolError) as err:
        parse_protocol(text)
    lines = text.splitlines()
    assert key in str(err.value) and f"line {lines.index(line) + 1}" in str(err.value)
    assert "\n" not in str(err.value)


def test_a_protocol_without_them_flags_no_pattern_or_season(study):
    result = study.store.check_bytes("b.csv", (HEADER + "\nanything at all,1999,Gull Flat,4.5,1.5,1,2\n").encode())
    assert not [f for f in result.flags if f.kind in (Kind.ID_PATTERN, Kind.SEASON_RANGE)]
