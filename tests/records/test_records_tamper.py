"""Tampering with the records store, tried the way someone with the database file (SQLite) or the benches'
own database login (PostgreSQL) would; each test asserts WHICH check catches it.

Every edit below goes around ringgauge (a raw sqlite3 connection, which does not set ringgauge's pragmas, or
a raw psycopg session), exactly as a person with file or login access would do it.
"""

from __future__ import annotations

import json
import sqlite3
import uuid

import pytest

from ringgauge.cli import main
from ringgauge.errors import StoreError
from ringgauge.records import RecordMeta, open_store
from ringgauge.records.keys import key_path, seal_result
from ringgauge.records.store import canonical_json, sha256_text


def run(capsys, *argv) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def filled(sqlite_path, make_result):
    """A store with three records and a correction (record 4 supersedes record 1)."""
    with open_store(sqlite_path) as s:
        s.add(RecordMeta(lot="A", serial="001"), make_result("1"))
        s.add(RecordMeta(lot="A", serial="002"), make_result("2", verdict="fail"))
        s.add(RecordMeta(lot="A", serial="003"), make_result("3"))
        s.supersede(1, "serial misread", meta_changes={"serial": "010"})
    return sqlite_path


def raw(path):
    con = sqlite3.connect(path)
    con.row_factory = sqlite3.Row
    return con


def drop_guards(con, table="inspection"):
    for t in ("no_update", "no_delete", "no_replace"):
        con.execute(f"DROP TRIGGER IF EXISTS {table}_{t}")


def check(path):
    with open_store(path) as s:
        return s.check()


def kinds(rep) -> dict:
    """{(table, row id or None): set of finding kinds}"""
    out: dict = {}
    for f in rep.findings:
        out.setdefault((f.table, f.row_id), set()).add(f.kind)
    return out


def test_untouched_store_checks_clean(filled, capsys):
    rep = check(filled)
    assert rep.ok and rep.records == 4 and rep.entries == 4, [f.message for f in rep.findings]
    code, out, _ = run(capsys, "records", "check", "--db", str(filled))
    assert code == 0 and "4 intact, 0 altered" in out and "chain of 4 entries intact" in out


# ------------------------------------------------------------------------------------------ REPLACE hole


@pytest.mark.parametrize("stmt", [
    "REPLACE INTO inspection SELECT * FROM inspection WHERE id = 2",
    "INSERT OR REPLACE INTO inspection SELECT * FROM inspection WHERE id = 2",
])
def test_replace_is_refused_even_on_a_hand_opened_connection(filled, stmt):
    con = raw(filled)  # no recursive_triggers here: only the BEFORE INSERT trigger can stop it
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        con.execute(stmt)
    con.close()
    assert check(filled).ok


def test_replace_with_new_values_after_dropping_the_triggers_is_named(filled, capsys):
    con = raw(filled)
    drop_guards(con)
    row = dict(con.execute("SELECT * FROM inspection WHERE id = 2").fetchone())
    res = json.loads(row["result_json"])
    res["verdict"]["overall"] = "pass"  # a failed part made to pass
    row["result_json"] = canonical_json(res)
    row["verdict"] = "pass"
    # recompute the plain checksum the way the record's own check does, so only the chain can tell
    from ringgauge.records.store import _record, _SELECT_COLS

    rec = _record([row.get(c) for c in _SELECT_COLS] + [None, row.get("origin")])
    row["content_sha256"] = sha256_text(canonical_json(rec.content()))
    cols = ", ".join(row)
    con.execute(f"REPLACE INTO inspection ({cols}) VALUES ({', '.join('?' * len(row))})", list(row.values()))
    con.commit()
    con.close()
    with open_store(filled) as s:
        assert s.get(2).intact()  # the plain checksum is fooled ...
    rep = check(filled)
    assert kinds(rep) == {("inspection", 2): {"ALTERED"}, (None, None): {"UNPROTECTED"}}  # ... the chain is not
    assert any("record 2: ALTERED" in f.message and "chain entry 2" in f.message for f in rep.findings)
    code, out, _ = run(capsys, "records", "check", "--db", str(filled))
    assert code == 1 and "record 2: ALTERED" in out and "3 intact, 1 altered" in out


def test_edit_with_a_recomputed_plain_checksum_is_found(filled, capsys):
    con = raw(filled)
    drop_guards(con)
    row = dict(con.execute("SELECT * FROM inspection WHERE id = 3").fetchone())
    res = json.loads(row["result_json"])
    res["radius_mm"] = 52.0
    from ringgauge.records.store import _record, _SELECT_COLS

    row["result_json"] = canonical_json(res)
    row["radius_mm"] = 52.0
    rec = _record([row.get(c) for c in _SELECT_COLS] + [None, row.get("origin")])
    con.execute("UPDATE inspection SET result_json = ?, radius_mm = 52.0, content_sha256 = ? WHERE id = 3",
                (row["result_json"], sha256_text(canonical_json(rec.content()))))
    con.commit()
    con.close()
    rep = check(filled)
    assert kinds(rep)[("inspection", 3)] == {"ALTERED"}
    assert rep.bad_records() == {3}
    assert main(["records", "show", "3", "--db", str(filled)]) == 0
    out = capsys.readouterr().out
    assert "intact (checksum matches)" in out and "CHAIN           record 3: ALTERED" in out


# ------------------------------------------------------------------------------------ inserts and deletions


def _forge_row(con, like: int) -> dict:
    row = dict(con.execute(f"SELECT * FROM inspection WHERE id = {like}").fetchone())
    row.pop("id")
    row["uid"] = str(uuid.uuid4())
    row["serial"] = "999"
    from ringgauge.records.store import _record, _SELECT_COLS

    rec = _record([1] + [row.get(c) for c in _SELECT_COLS[1:]] + [None, row.get("origin")])
    row["content_sha256"] = sha256_text(canonical_json(rec.content()))
    return row


def test_forged_insert_without_a_chain_entry_is_named(filled):
    con = raw(filled)
    row = _forge_row(con, 2)
    con.execute(f"INSERT INTO inspection ({', '.join(row)}) VALUES ({', '.join('?' * len(row))})", list(row.values()))
    con.commit()
    con.close()
    rep = check(filled)
    assert kinds(rep) == {("inspection", 5): {"INSERTED"}}


def test_forged_insert_with_a_made_up_chain_entry_is_named(filled):
    """Someone who knows the chain's format but not the shop's key adds a row and a matching entry."""
    from ringgauge.records.store import entry_hash, row_hash

    con = raw(filled)
    row = _forge_row(con, 2)
    con.execute(f"INSERT INTO inspection ({', '.join(row)}) VALUES ({', '.join('?' * len(row))})", list(row.values()))
    new = dict(con.execute("SELECT * FROM inspection WHERE id = 5").fetchone())
    last = con.execute("SELECT seq, entry_hash, key_id FROM chain ORDER BY seq DESC LIMIT 1").fetchone()
    rh = row_hash("inspection", new)
    eh = entry_hash(last[0] + 1, "inspection", 5, rh, last[1])
    con.execute("INSERT INTO chain VALUES (?, 'inspection', 5, ?, ?, ?, ?, ?, 0, '2026-01-01')",
                (last[0] + 1, rh, last[1], eh, last[2], sha256_text("guessed key" + eh)))
    con.commit()
    con.close()
    rep = check(filled)
    assert kinds(rep) == {("inspection", 5): {"FORGED"}}


def test_deleted_record_is_named(filled, capsys):
    con = raw(filled)
    drop_guards(con)
    con.execute("PRAGMA foreign_keys=OFF")
    con.execute("DELETE FROM inspection WHERE id = 2")
    con.commit()
    con.close()
    rep = check(filled)
    assert kinds(rep) == {("inspection", 2): {"DELETED"}, (None, None): {"UNPROTECTED"}}
    code, out, _ = run(capsys, "records", "check", "--db", str(filled))
    assert code == 1 and "record 2 is in the chain (entry 2) but no longer in the store" in out


def test_deleted_correction_is_named(filled):
    con = raw(filled)
    drop_guards(con)
    con.execute("DELETE FROM inspection WHERE id = 4")  # the correction of record 1 vanishes
    con.commit()
    con.close()
    with open_store(filled) as s:
        assert s.get(1).superseded_by is None  # to a listing, record 1 looks current again
    rep = check(filled)
    assert ("inspection", 4) in kinds(rep) and kinds(rep)[("inspection", 4)] == {"DELETED"}


def test_deleted_record_and_its_chain_entry_break_the_chain(filled):
    con = raw(filled)
    drop_guards(con)
    drop_guards(con, "chain")
    con.execute("DELETE FROM inspection WHERE id = 2")
    con.execute("DELETE FROM chain WHERE seq = 2")
    con.commit()
    con.close()
    rep = check(filled)
    assert "MISSING" in kinds(rep)[(None, None)]


def test_newest_records_cut_off_the_end_are_found(filled):
    con = raw(filled)
    drop_guards(con)
    drop_guards(con, "chain")
    con.execute("DELETE FROM inspection WHERE id = 4")
    con.execute("DELETE FROM chain WHERE seq = 4")
    con.commit()
    con.close()
    rep = check(filled)
    assert "END REMOVED" in kinds(rep)[(None, None)]  # this computer remembers it wrote entry 4


def test_reordered_chain_entries_are_named(filled):
    con = raw(filled)
    drop_guards(con, "chain")
    con.execute("UPDATE chain SET seq = seq + 100 WHERE seq IN (2, 3)")
    con.execute("UPDATE chain SET seq = 3 WHERE seq = 102")
    con.execute("UPDATE chain SET seq = 2 WHERE seq = 103")
    con.commit()
    con.close()
    rep = check(filled)
    found = kinds(rep)
    assert "BROKEN LINK" in found[(None, None)]
    assert "REORDERED" in found[("inspection", 2)] and "FORGED" in found[("inspection", 2)]


# ------------------------------------------------------------------------------------------ damaged JSON


def test_damaged_json_is_reported_not_a_crash(filled, capsys):
    con = raw(filled)
    drop_guards(con)
    con.execute("UPDATE inspection SET result_json = '{\"radius_mm\": 51.' WHERE id = 3")
    con.commit()
    con.close()
    rep = check(filled)
    assert kinds(rep)[("inspection", 3)] == {"DAMAGED"}
    code, out, err = run(capsys, "records", "check", "--db", str(filled))
    assert code == 1 and "record 3: DAMAGED" in out and "damaged JSON in its stored result" in out
    code, out, err = run(capsys, "records", "show", "3", "--db", str(filled))
    assert code == 4 and err.count("\n") == 1 and "damaged JSON" in err  # one line, not exit 70


# ------------------------------------------------------------------------------------- keys and protection


def test_missing_trigger_makes_the_store_read_only(filled, make_result):
    con = raw(filled)
    con.execute("DROP TRIGGER inspection_no_delete")
    con.commit()
    con.close()
    with open_store(filled) as s:
        assert s.find()  # reading still works
        with pytest.raises(StoreError, match=r"inspection_no_delete on inspection is missing\); writing refused"):
            s.add(RecordMeta(lot="A"), make_result("9"))
    assert "UNPROTECTED" in kinds(check(filled))[(None, None)]
    code = main(["records", "init-server", "--db", str(filled)])  # the owner puts the protection back
    assert code == 0
    with open_store(filled) as s:
        s.add(RecordMeta(lot="A"), make_result("9"))
    assert check(filled).ok


def test_another_shops_key_cannot_write_or_check(filled, make_result, tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_RECORDS_KEY", str(tmp_path / "other.key"))
    with open_store(filled) as s:
        with pytest.raises(StoreError, match="has none"):
            s.add(RecordMeta(lot="A"), make_result("9"))
        (tmp_path / "other.key").write_text("ab" * 32)
        (tmp_path / "other.key").chmod(0o600)
        with pytest.raises(StoreError, match="is sealed with records key"):
            s.add(RecordMeta(lot="A"), make_result("9"))
        assert "UNVERIFIABLE" in kinds(s.check())[(None, None)]


def test_a_key_others_can_read_is_refused(filled, make_result):
    key_path().chmod(0o644)
    with open_store(filled) as s:
        with pytest.raises(StoreError, match="can be read by others"):
            s.add(RecordMeta(lot="A"), make_result("9"))
    key_path().chmod(0o600)


def test_upgrade_seals_old_records_and_says_so(sqlite_path, make_result):
    s = open_store(sqlite_path, migrate_to=2)
    s.add(RecordMeta(lot="old"), make_result("1"))
    s.close()
    rep = check(sqlite_path)
    assert rep.ok and rep.entries == 1 and any("before the chain existed" in n for n in rep.notes)


# ------------------------------------------------------------------------------------- hand-made corrections


def test_hand_made_supersede_is_refused_or_flagged_manual(filled, capsys, tmp_path, make_result):
    from ringgauge.certificates import issue_certificate
    from pypdf import PdfReader

    f = tmp_path / "edited.json"
    res = make_result("1", radius_mm=1234.5)
    res["radius_U_mm"] = 0.001  # R = 1234.5 ± 0.001 mm, typed into a result file by hand
    f.write_text(json.dumps(res))
    code, _, err = run(capsys, "records", "supersede", "4", "--db", str(filled), "--reason", "re-measured",
                       "--result", str(f))
    assert code == 2 and "not accepted as a measurement" in err
    # a file sealed by ringgauge and edited afterwards is refused too
    sealed = seal_result(make_result("1"))
    sealed["radius_mm"] = 1234.5
    f.write_text(json.dumps(sealed))
    code, _, err = run(capsys, "records", "supersede", "4", "--db", str(filled), "--reason", "re-measured",
                       "--result", str(f))
    assert code == 2 and "edited after ringgauge wrote it" in err
    # with --manual it is kept, flagged wherever it is shown
    f.write_text(json.dumps(res))
    code, out, err = run(capsys, "records", "supersede", "4", "--db", str(filled), "--reason", "typed from the log",
                         "--result", str(f), "--manual")
    assert code == 0 and "MANUAL ENTRY" in out and "MANUAL ENTRY" in err
    code, out, _ = run(capsys, "records", "show", "5", "--db", str(filled))
    assert "MANUAL ENTRY" in out
    with open_store(filled) as s:
        rec = s.get(5)
        assert rec.manual and rec.intact() and s.check().ok
        _, path, _ = issue_certificate(s, 5, tmp_path / "manual.pdf", {"name": "Fernhill Optical Workshop"})
    text = " ".join(p.extract_text() for p in PdfReader(path).pages)
    assert "MANUAL ENTRY" in text


def test_reanalysed_correction_measures_the_image_again(sqlite_path, capsys, tmp_path):
    from ringgauge import synth
    from ringgauge.bench_setup import default_setup
    from ringgauge.imaging import save_png
    from ringgauge.pipeline import analyse_files

    img = synth.newton_rings(800.0, camera=synth.Camera(width=400, height=320, pixel_um=10.0), rng=3)
    p = tmp_path / "lens.png"
    save_png(p, img.image01)
    setup = default_setup(10.0)
    res = analyse_files([str(p)], setup).to_dict()
    with open_store(sqlite_path) as s:
        s.add(RecordMeta(lot="R", serial="7"), res, image_path=str(p))
    code, out, err = run(capsys, "records", "supersede", "1", "--db", str(sqlite_path), "--reason",
                         "checked again", "--reanalyse")
    assert code == 0, err
    assert "measured again (the same image as the record's)" in out
    with open_store(sqlite_path) as s:
        new = s.get(2)
        assert new.origin == "re-analysed" and new.radius_mm == pytest.approx(res["radius_mm"], rel=1e-9)
        assert s.check().ok


def test_damaged_chain_entry_is_reported(filled, capsys):
    con = raw(filled)
    drop_guards(con, "chain")
    con.execute("UPDATE chain SET row_id = 'two' WHERE seq = 2")
    con.commit()
    con.close()
    code, out, err = run(capsys, "records", "check", "--db", str(filled))
    assert code == 1 and "chain entry 2 is damaged" in out and "Traceback" not in out + err
