"""The inspection store against a real SQLite file and a real PostgreSQL server: append-only, supersede
chains, filters, migrations, one transaction per write."""

from __future__ import annotations

import sqlite3

import pytest

from ringgauge.errors import InputError, StoreError
from ringgauge.records import RecordFilter, RecordMeta, open_store
from ringgauge.records.store import SCHEMA_VERSION


def test_add_and_read_back_everything(store, make_result):
    res = make_result("p1")
    meta = RecordMeta(part="PCX-25-50", drawing="D-1204 rev C", surface="S1", lot="L-0042", serial="0007",
                      operator="a.kestrel", customer="Harbour Optics Guild", order_ref="PO-5531", temperature_c=20.4)
    rec = store.add(meta, res)
    back = store.get(rec.id)
    assert back.meta == meta
    assert back.result == res
    assert back.status == "ok" and back.failure_reason is None
    assert back.image_sha256 == res["image"]["sha256"]
    assert back.image_name == "p1.png"
    assert back.verdict == "pass"
    assert back.radius_mm == pytest.approx(51.7) and back.radius_U_mm == pytest.approx(0.04)
    assert back.power_fringes == pytest.approx(1.2)
    assert back.power_U_fringes == pytest.approx(0.1)  # k * u
    assert back.setup["test_plate"]["id"] == "TP-0117"
    assert back.created_utc.endswith("Z") and back.created_utc[:2] == "20"
    assert back.software_version
    assert back.intact()
    assert back.current and back.superseded_by is None


def test_failure_record_keeps_reason(store):
    rec = store.add(RecordMeta(lot="L1"), None, image_path="/x/bad.png", image_sha256="ab" * 32,
                    failure="no ring system found")
    assert rec.status == "failed" and rec.failure_reason == "no ring system found" and rec.result is None
    assert [r.id for r in store.find(RecordFilter(status="failed"))] == [rec.id]


def test_record_needs_result_or_reason(store):
    with pytest.raises(InputError, match="either a result or the reason"):
        store.add(RecordMeta(), None)
    with pytest.raises(InputError, match="64 hex"):
        store.add(RecordMeta(), None, image_sha256="xyz", failure="bad")


def test_supersede_keeps_history(store, make_result):
    a = store.add(RecordMeta(lot="L1", serial="17", part="P"), make_result("x"))
    b = store.supersede(a.id, "serial number mistyped", meta_changes={"serial": "71"})
    assert b.supersedes == a.id and b.supersede_reason == "serial number mistyped"
    assert b.meta.serial == "71" and b.meta.lot == "L1" and b.result == a.result
    old = store.get(a.id)
    assert old.superseded_by == b.id and old.meta.serial == "17"  # nothing edited in place
    assert [r.id for r in store.find(RecordFilter(lot="L1"))] == [b.id]
    assert [r.id for r in store.find(RecordFilter(lot="L1", include_superseded=True))] == [a.id, b.id]
    c = store.supersede(b.id, "re-analysed with the right bench profile", result=make_result("x", radius_mm=51.9))
    assert [r.id for r in store.history(a.id)] == [a.id, b.id, c.id]
    assert [r.id for r in store.history(c.id)] == [a.id, b.id, c.id]
    assert store.get(c.id).radius_mm == pytest.approx(51.9)
    with pytest.raises(StoreError, match=f"already superseded by record {b.id}"):
        store.supersede(a.id, "again")
    with pytest.raises(InputError, match="needs a reason"):
        store.supersede(c.id, "  ")


def test_rows_cannot_be_edited_or_deleted(store_target, make_result):
    s = open_store(store_target)
    rec = s.add(RecordMeta(lot="L1"), make_result())
    for sql in ("UPDATE inspection SET verdict = 'fail' WHERE id = ?", "DELETE FROM inspection WHERE id = ?"):
        with pytest.raises(StoreError, match="append-only"):
            with s._tx() as cur:
                s._q(cur, sql, (rec.id,))
    assert s.get(rec.id).verdict == "pass" and s.get(rec.id).intact()
    s.close()


def test_filters(store, make_result):
    store.add(RecordMeta(lot="A", part="P1", operator="ann"), make_result("1"))
    store.add(RecordMeta(lot="A", part="P2", operator="bo"), make_result("2", verdict="fail"))
    store.add(RecordMeta(lot="B", part="P1", operator="ann"), make_result("3"))
    ids = lambda **kw: [r.meta.lot + r.meta.part for r in store.find(RecordFilter(**kw))]  # noqa: E731
    assert ids(lot="A") == ["AP1", "AP2"]
    assert ids(part="P1") == ["AP1", "BP1"]
    assert ids(operator="bo") == ["AP2"]
    assert ids(verdict="fail") == ["AP2"]
    assert ids(lot="A", verdict="pass") == ["AP1"]
    today = store.find()[0].created_utc[:10]
    assert len(ids(since=today, until=today)) == 3
    assert ids(until="2000-01-01") == []
    with pytest.raises(InputError, match="YYYY-MM-DD"):
        store.find(RecordFilter(since="yesterday"))
    assert store.lots() == [("A", 2), ("B", 1)]


def test_once_per_lot_returns_existing(store, make_result):
    a = store.add(RecordMeta(lot="L"), make_result("same"), once_per_lot=True)
    b = store.add(RecordMeta(lot="L"), make_result("same"), once_per_lot=True)
    assert a.id == b.id and len(store.find(RecordFilter(lot="L"))) == 1
    assert set(store.done_in_lot("L")) == {a.image_sha256}


def test_issued_documents_are_numbered_and_kept(store, make_result):
    rec = store.add(RecordMeta(lot="L"), make_result())
    d1 = store.issue("certificate", {"x": 1}, record_id=rec.id, prefix="QA")
    d2 = store.issue("lot report", {"y": 2}, lot="L", prefix="QA")
    assert d1.number != d2.number and d1.number.startswith("QA-C") and d2.number.startswith("QA-L")
    assert store.document(d1.number).content == {"x": 1, "number": d1.number, "issued_utc": d1.issued_utc}
    assert [d.number for d in store.documents(record_id=rec.id)] == [d1.number]
    with pytest.raises(StoreError, match="append-only"):
        with store._tx() as cur:
            store._q(cur, "DELETE FROM issued_document")


def test_schema_upgrade_keeps_records(store_target, make_result):
    s = open_store(store_target, migrate_to=1)
    assert s.schema_version() == 1
    rec = s.add(RecordMeta(lot="old"), make_result())
    s.close()
    s = open_store(store_target)
    assert s.schema_version() == SCHEMA_VERSION
    assert s.get(rec.id).result == rec.result and s.get(rec.id).intact()
    s.issue("certificate", {"a": 1}, record_id=rec.id)
    s.close()


def test_newer_schema_is_refused(sqlite_path):
    open_store(sqlite_path).close()
    con = sqlite3.connect(sqlite_path)
    con.execute("INSERT INTO schema_migration VALUES (99, 'future', '2099-01-01')")
    con.commit()
    con.close()
    with pytest.raises(StoreError, match="schema version 99, newer"):
        open_store(sqlite_path)


def test_tampering_is_detected(sqlite_path, make_result):
    s = open_store(sqlite_path)
    rec = s.add(RecordMeta(lot="L"), make_result())
    s.close()
    con = sqlite3.connect(sqlite_path)
    con.execute("DROP TRIGGER inspection_no_update")  # someone forcing an edit by hand
    con.execute("UPDATE inspection SET result_json = replace(result_json, '51.7', '51.9')")
    con.commit()
    con.close()
    s = open_store(sqlite_path)
    assert not s.get(rec.id).intact()
    s.close()


def test_bad_targets_give_one_line(tmp_path):
    with pytest.raises(StoreError, match="is a folder"):
        open_store(tmp_path)
    with pytest.raises(StoreError, match="does not exist"):
        open_store(tmp_path / "nope" / "r.sqlite")
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database" * 100)
    with pytest.raises(StoreError, match="not a ringgauge records store|file is not a database"):
        open_store(junk)
    with pytest.raises(StoreError, match="cannot reach the records server"):
        open_store("postgresql://nobody:secret@/none?host=/nonexistent-dir&port=1")


def test_password_is_not_shown(tmp_path):
    with pytest.raises(StoreError) as info:
        open_store("postgresql://inspector:hunter2@/none?host=/nonexistent-dir&port=1")
    assert "hunter2" not in str(info.value)


def test_default_store_lives_in_ringgauge_home(tmp_path, monkeypatch, make_result):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "h"))
    with open_store() as s:
        s.add(RecordMeta(), make_result())
    assert (tmp_path / "h" / "records.sqlite").exists()


def test_light_listing_leaves_the_result_unread(store, make_result):
    store.add(RecordMeta(lot="L"), make_result("1"))
    (light,) = store.find(RecordFilter(lot="L"), with_result=False)
    (full,) = store.find(RecordFilter(lot="L"))
    assert light.result is None and not light.has_result and full.result is not None
    assert (light.verdict, light.radius_mm, light.setup) == (full.verdict, full.radius_mm, full.setup)
    with pytest.raises(ValueError, match="with its result"):
        light.intact()
