"""PostgreSQL with the owner / bench split that 'ringgauge records init-server' sets up: the benches' login can
add and read records but cannot change, delete or unprotect them; an owner who switches a trigger off is
noticed by every ringgauge that opens the store, and by 'records check'."""

from __future__ import annotations

import psycopg
import pytest

from ringgauge.cli import main
from ringgauge.errors import StoreError
from ringgauge.records import RecordMeta, open_store

pytestmark = pytest.mark.postgres


def kinds(rep) -> dict:
    out: dict = {}
    for f in rep.findings:
        out.setdefault((f.table, f.row_id), set()).add(f.kind)
    return out


def test_bench_login_may_only_insert_and_read(pg_split, make_result):
    admin, bench_url, owner, bench = pg_split
    with open_store(bench_url) as s:
        rec = s.add(RecordMeta(lot="PG", serial="1"), make_result("1"))
        s.supersede(rec.id, "serial misread", meta_changes={"serial": "10"})
        doc = s.issue("certificate", {"x": 1}, record_id=rec.id)
        s.record_file(doc.number, "ab" * 32, signed=True, signer="test")
        assert s.write_refusal is None and s.check().ok and s.issued_files(doc.number)[0]["signed"]
    with psycopg.connect(bench_url, autocommit=True) as c:
        for stmt in ("UPDATE inspection SET serial = '2'", "DELETE FROM inspection", "DELETE FROM chain",
                     "TRUNCATE inspection", "UPDATE issued_document SET content_json = '{}'",
                     "INSERT INTO store_info VALUES ('key_id', 'x')"):
            with pytest.raises(psycopg.errors.InsufficientPrivilege):
                c.execute(stmt)
        # switching the protection off needs ownership: the server refuses the benches' login
        with pytest.raises(psycopg.errors.InsufficientPrivilege, match="must be owner"):
            c.execute("ALTER TABLE inspection DISABLE TRIGGER inspection_append_only")
        with pytest.raises(psycopg.errors.InsufficientPrivilege):
            c.execute("DROP TRIGGER inspection_append_only ON inspection")
    with open_store(bench_url) as s:
        assert s.check().ok and s.document(doc.number).content["x"] == 1


def test_owner_disabling_a_trigger_is_noticed_on_opening(pg_split, make_result, capsys):
    admin, bench_url, owner, bench = pg_split
    with open_store(bench_url) as s:
        s.add(RecordMeta(lot="PG", serial="1"), make_result("1"))
        s.add(RecordMeta(lot="PG", serial="2"), make_result("2"))
    with psycopg.connect(admin, autocommit=True) as c:
        c.execute(f"SET ROLE {owner}")
        c.execute("ALTER TABLE inspection DISABLE TRIGGER inspection_append_only")
        c.execute("DELETE FROM inspection WHERE id = 2")
    with open_store(bench_url) as s:
        assert "inspection_append_only on inspection is disabled" in (s.write_refusal or "")
        with pytest.raises(StoreError, match="is disabled\\); writing refused"):
            s.add(RecordMeta(lot="PG", serial="3"), make_result("3"))
        found = kinds(s.check())
        assert found[("inspection", 2)] == {"DELETED"} and "UNPROTECTED" in found[(None, None)]
    code = main(["records", "check", "--db", bench_url])
    out = capsys.readouterr().out
    assert code == 1 and "disabled" in out and "record 2 is in the chain" in out
    # the administrator re-runs init-server: the trigger is on again, the deletion stays on record
    assert main(["records", "init-server", "--db", admin, "--owner", owner, "--bench", bench]) == 0
    assert "re-enabled the append-only trigger inspection_append_only" in capsys.readouterr().out
    with open_store(bench_url) as s:
        assert s.write_refusal is None
        assert kinds(s.check()) == {("inspection", 2): {"DELETED"}}


def test_owner_edit_with_recomputed_checksum_is_found(pg_split, make_result):
    admin, bench_url, owner, bench = pg_split
    with open_store(bench_url) as s:
        s.add(RecordMeta(lot="PG", serial="1"), make_result("1", verdict="fail"))
    with psycopg.connect(admin, autocommit=True) as c:
        c.execute(f"SET ROLE {owner}")
        c.execute("ALTER TABLE inspection DISABLE TRIGGER inspection_append_only")
        c.execute("UPDATE inspection SET verdict = 'pass', result_json = replace(result_json, '\"fail\"', '\"pass\"')")
        c.execute("ALTER TABLE inspection ENABLE TRIGGER inspection_append_only")  # and covers the tracks
    with open_store(bench_url) as s:
        assert s.write_refusal is None
        assert kinds(s.check()) == {("inspection", 1): {"ALTERED"}}


def test_print_sql_is_a_complete_script(tmp_path, monkeypatch, capsys, pg_url):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    assert main(["records", "init-server", "--print-sql", "--owner", "o_sql", "--bench", "b_sql"]) == 0
    script = capsys.readouterr().out
    assert "CREATE ROLE o_sql NOLOGIN" in script and "GRANT SELECT, INSERT ON inspection TO b_sql" in script
    assert "UPDATE" not in script.split("GRANT", 1)[1].split("RESET", 1)[0].replace("UPDATE OR DELETE", "")
    with psycopg.connect(pg_url, autocommit=True) as c:  # it runs as it stands
        c.execute(script)
    with open_store(pg_url.replace("postgresql://postgres@", "postgresql://b_sql@")) as s:
        assert s.write_refusal is None and s.schema_version() >= 3
    with psycopg.connect(pg_url, autocommit=True) as c:
        c.execute("DROP OWNED BY o_sql, b_sql CASCADE")
        c.execute("DROP ROLE o_sql")
        c.execute("DROP ROLE b_sql")
