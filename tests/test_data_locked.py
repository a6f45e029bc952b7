"""Issue 16, points 1 and 7: the DuckDB connection is locked, and data paths stay inside the repository.

The lock (modeldiff.data.lock) is checked on the connection itself, with SQL
that no model can hold any more: whatever reached it could read or write no
file but the data, install or load no extension and change no setting. Each
refusal has a twin showing the data itself is still read. Option names are
DuckDB's own (duckdb_settings() of the installed duckdb).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import duckdb
import pytest
from clikit import run as _run

from gitkit import git, init_repo, isolate_git
from modeldiff import load
from modeldiff.data import Database
from modeldiff.engine import Query
from modeldiff.errors import ModeldiffError

SECRET = "token-9b7e-do-not-print"
TRIPS = "trip_key,fare,status\n1,2.50,completed\n2,1.25,cancelled\n"
MODEL = {
    "model": "locked", "format": 1,
    "tables": {"trips": {"kind": "fact", "key": "trip_key", "source": "data/trips.csv",
                         "columns": {"trip_key": "integer", "fare": "decimal", "status": "text"}}},
    "measures": {"fare_total": {"table": "trips", "expr": "max(status)"}},
    "reports": {"overview": {"measures": ["fare_total"]}},
}


@pytest.fixture
def site(tmp_path: Path) -> dict[str, Path]:
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "secret.csv").write_text(f"trip_key,fare,status\n1,1.0,{SECRET}\n")
    repo = tmp_path / "repo"
    (repo / "data").mkdir(parents=True)
    (repo / ".git").mkdir()
    (repo / "data" / "trips.csv").write_text(TRIPS)
    return {"outside": outside, "secret": outside / "secret.csv", "repo": repo}


def _write_model(repo: Path, source: str = "data/trips.csv", name: str = "locked.model.yaml") -> Path:
    model = json.loads(json.dumps(MODEL))
    model["tables"]["trips"]["source"] = source
    path = repo / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(model))
    return path


# ---------------------------------------------------------------- the locked connection


def _hostile(secret: Path, outside: Path) -> list[str]:
    return [
        f"SELECT * FROM read_text('{secret}')",
        f"SELECT * FROM read_csv('{secret}')",
        f"SELECT * FROM glob('{outside}/*')",
        f"COPY (SELECT 1 AS a) TO '{outside}/copied.csv'",
        f"ATTACH '{outside}/attached.db' AS pwned",
        f"EXPORT DATABASE '{outside}/exported'",
        "INSTALL httpfs",
        "LOAD httpfs",
        "SET enable_external_access = true",
        "SET lock_configuration = false",
        f"SET allowed_paths = ['{secret}']",
        "PRAGMA enable_profiling",
        f"SET profiling_output = '{outside}/profile.json'",
    ]


@pytest.mark.parametrize("kind", ["csv", "parquet", "db"])
def test_after_opening_the_connection_reaches_no_file_extension_or_setting(site, kind):
    path = _write_model(site["repo"])
    model = load.load_path(path).model
    data_dir = db_file = None
    if kind == "parquet":
        folder = site["repo"] / "pq"
        folder.mkdir()
        connection = duckdb.connect()
        connection.execute(f"COPY (SELECT * FROM read_csv('{site['repo'] / 'data' / 'trips.csv'}', header = true)) "
                           f"TO '{folder / 'trips.parquet'}' (FORMAT parquet)")
        connection.close()
        data_dir = str(folder)
    elif kind == "db":
        db_file = str(site["repo"] / "data.duckdb")
        connection = duckdb.connect(db_file)
        connection.execute(f"CREATE TABLE trips AS SELECT * FROM read_csv('{site['repo'] / 'data' / 'trips.csv'}', "
                           "header = true)")
        connection.close()
    with Database.open(model, path, data_dir=data_dir, db_file=db_file) as db:
        for statement in _hostile(site["secret"], site["outside"]):
            with pytest.raises(duckdb.Error):
                db.connection.execute(statement).fetchall()
        # the twin: the data itself is read
        assert db.connection.execute("SELECT count(*) FROM trips").fetchone()[0] == 2
        assert db.connection.execute("SELECT current_setting('enable_external_access')").fetchone()[0] is False
    assert sorted(p.name for p in site["outside"].iterdir()) == ["secret.csv"]


def test_an_unlocked_connection_does_read_the_file(site):
    # The twin of the test above at the DuckDB level: without the lock the same statement reads the secret.
    connection = duckdb.connect()
    assert SECRET in connection.execute(f"SELECT content FROM read_text('{site['secret']}')").fetchone()[0]
    connection.close()


def test_databases_built_from_rows_are_locked_too(site):
    model = load.load_path(_write_model(site["repo"])).model
    with Database.from_rows(model, {"trips": [(1, 2.5, "completed")]}) as db:
        with pytest.raises(duckdb.Error):
            db.connection.execute(f"SELECT * FROM read_text('{site['secret']}')").fetchall()
        assert db.connection.execute("SELECT count(*) FROM trips").fetchone()[0] == 1


def test_several_statements_in_one_call_are_refused_before_any_runs(site):
    model = load.load_path(_write_model(site["repo"])).model
    with Database.from_rows(model, {"trips": [(1, 2.5, "completed")]}) as db:
        with pytest.raises(ModeldiffError, match="2 statements"):
            db.run(Query(sql="SELECT 1; CREATE TABLE pwned AS SELECT 1", columns=("a",)))
        assert db.connection.execute("SELECT count(*) FROM duckdb_tables() WHERE table_name = 'pwned'").fetchone() == (0,)
        assert db.run(Query(sql="SELECT 1 AS a", columns=("a",))) == [(1,)]


def test_a_stored_view_reading_outside_the_database_file_is_refused_with_a_reason(site):
    db_file = site["repo"] / "views.duckdb"
    connection = duckdb.connect(str(db_file))
    connection.execute(f"CREATE VIEW trips AS SELECT 1 AS trip_key, 1.0 AS fare, content AS status "
                       f"FROM read_text('{site['secret']}')")
    connection.close()
    path = _write_model(site["repo"])
    code, out, err = _run("eval", path, "--data", db_file)
    assert code == 2 and out == "" and SECRET not in err
    assert "view that reads outside the database file" in err and len(err.strip().splitlines()) == 1


def test_a_stored_view_over_the_files_own_table_is_read(site):
    db_file = site["repo"] / "views.duckdb"
    connection = duckdb.connect(str(db_file))
    connection.execute("CREATE TABLE raw AS SELECT 1 AS trip_key, 1.5 AS fare, 'completed' AS status")
    connection.execute("CREATE VIEW trips AS SELECT * FROM raw")
    connection.close()
    path = _write_model(site["repo"])
    code, out, err = _run("eval", path, "--data", db_file, "--format", "json")
    assert (code, err) == (0, "") and json.loads(out)["rows"] == [["completed"]]


# ---------------------------------------------------------------- point 7: data paths


def test_a_source_inside_the_repository_is_read(site):
    path = _write_model(site["repo"] / "models", source="../data/trips.csv")  # `..` that stays inside
    code, out, err = _run("eval", path, "--format", "json")
    assert (code, err) == (0, "") and json.loads(out)["rows"] == [["completed"]]


@pytest.mark.parametrize("source, says", [
    ("{secret}", "absolute path"),
    ("../outside/secret.csv", "through `..`"),
    ("data/../../outside/secret.csv", "through `..`"),
])
def test_a_source_leading_out_of_the_repository_is_refused(site, source, says):
    path = _write_model(site["repo"], source=source.format(secret=site["secret"]))
    code, out, err = _run("eval", path)
    assert code == 2 and out == "" and SECRET not in err
    assert says in err and "--allow-data-outside" in err and len(err.strip().splitlines()) == 1


def test_allow_data_outside_widens_it(site):
    path = _write_model(site["repo"], source="../outside/secret.csv")
    code, out, err = _run("eval", path, "--allow-data-outside", "--format", "json")
    assert (code, err) == (0, "") and json.loads(out)["rows"] == [[SECRET]]


def test_a_committed_link_to_a_secrets_file_is_refused(tmp_path, monkeypatch, site):
    isolate_git(monkeypatch, tmp_path)
    repo = init_repo(tmp_path / "linked")
    (repo / "data").mkdir()
    os.symlink(site["secret"], repo / "data" / "trips.csv")
    path = _write_model(repo)
    git(repo, "add", "-A")
    git(repo, "commit", "-q", "-m", "data")
    assert "120000" in git(repo, "ls-files", "-s", "data/trips.csv")  # committed as a link
    code, out, err = _run("eval", path)
    assert code == 2 and out == "" and SECRET not in out + err
    assert "link leading out of the repository" in err and len(err.strip().splitlines()) == 1
    code, out, err = _run("eval", path, "--allow-data-outside")
    assert code == 0 and SECRET in out  # what the option allows, and what the default kept out


def test_a_link_inside_the_repository_is_read(site):
    os.symlink(site["repo"] / "data" / "trips.csv", site["repo"] / "data" / "alias.csv")
    path = _write_model(site["repo"], source="data/alias.csv")
    code, out, err = _run("eval", path, "--format", "json")
    assert (code, err) == (0, "") and json.loads(out)["rows"] == [["completed"]]


def test_a_link_in_the_data_folder_leading_out_is_refused(site):
    folder = site["repo"] / "given"
    folder.mkdir()
    os.symlink(site["secret"], folder / "trips.csv")
    path = _write_model(site["repo"])
    code, out, err = _run("eval", path, "--data", folder)
    assert code == 2 and SECRET not in out + err and "outside" in err and len(err.strip().splitlines()) == 1
    (folder / "trips.csv").unlink()
    (folder / "trips.csv").write_text(TRIPS)
    assert _run("eval", path, "--data", folder)[0] == 0


def test_a_model_outside_any_repository_reads_only_below_its_folder(tmp_path):
    (tmp_path / "plain" / "data").mkdir(parents=True)
    (tmp_path / "plain" / "data" / "trips.csv").write_text(TRIPS)
    (tmp_path / "shared.csv").write_text(TRIPS)
    inside = _write_model(tmp_path / "plain")
    assert _run("eval", inside)[0] == 0
    outside = _write_model(tmp_path / "plain", source="../shared.csv", name="up.model.yaml")
    code, _, err = _run("eval", outside)
    assert code == 2 and "through `..`" in err
