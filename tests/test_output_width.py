"""Issue 12, "Output where it is read": off a terminal `eval` cuts no column header and `verify` wraps no
value inside a cell, whatever COLUMNS says; on a terminal both fit the terminal's width (the twins).
`eval` reads `REV:PATH` like every other command.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest

from modeldiff import compare, demo_data, verify
from modeldiff.cli import main
from modeldiff.render import verify_out

from gitkit import git, init_repo, isolate_git

ROOT = Path(__file__).resolve().parent.parent
MODEL = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"

# Long names on purpose: the table is wider than COLUMNS below.
WIDE = """\
model: wide
format: 1
tables:
  appointments_booked_online:
    kind: fact
    key: appointment_key
    columns: {appointment_key: integer, clinic_key: integer, minutes_waited: integer}
    source: data/appointments_booked_online.csv
  clinics_of_the_northern_region:
    kind: dimension
    key: clinic_key
    columns: {clinic_key: integer, clinic_name_as_registered: text}
    source: data/clinics_of_the_northern_region.csv
links:
  appointments_clinic: {from: appointments_booked_online.clinic_key, to: clinics_of_the_northern_region.clinic_key}
measures:
  appointments_booked_in_total: {table: appointments_booked_online, expr: count(*)}
  average_minutes_waited_per_appointment: {table: appointments_booked_online, expr: avg(minutes_waited)}
reports:
  waiting_by_clinic:
    measures: [appointments_booked_in_total, average_minutes_waited_per_appointment]
    by: [clinics_of_the_northern_region.clinic_name_as_registered]
"""
HEADERS = ("clinics_of_the_northern_region.clinic_name_as_registered", "appointments_booked_in_total",
           "average_minutes_waited_per_appointment")
CLINIC_NAME = "North Harbour Community Health Centre and Walk-in Clinic"


class Terminal(io.StringIO):
    """A stream that says it is a terminal (rich then takes its width from COLUMNS)."""

    def isatty(self) -> bool:
        return True


@pytest.fixture
def wide(tmp_path) -> Path:
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "appointments_booked_online.csv").write_text(
        "appointment_key,clinic_key,minutes_waited\n1,1,10\n2,1,20\n3,2,5\n")
    (tmp_path / "data" / "clinics_of_the_northern_region.csv").write_text(
        f"clinic_key,clinic_name_as_registered\n1,{CLINIC_NAME}\n2,Quay\n")
    path = tmp_path / "wide.model.yaml"
    path.write_text(WIDE)
    return path


def eval_text(spec, stream) -> str:
    code = main(["eval", str(spec)], stdout=stream, stderr=io.StringIO())
    assert code == 0
    return stream.getvalue()


def test_eval_piped_keeps_every_header_and_value_whole_even_with_a_narrow_columns(wide, monkeypatch):
    monkeypatch.setenv("COLUMNS", "40")
    monkeypatch.delenv("FORCE_COLOR", raising=False)
    out = eval_text(wide, io.StringIO())
    assert "…" not in out
    lines = out.splitlines()
    header = next(line for line in lines if HEADERS[0] in line)
    assert all(h in header for h in HEADERS)  # every header whole, on one line
    assert any(CLINIC_NAME in line and "15" in line for line in lines)  # a row on one line, its value whole


def test_eval_on_a_terminal_fits_the_terminal(wide, monkeypatch):
    monkeypatch.setenv("COLUMNS", "40")
    out = re.sub(r"\x1b\[[0-9;]*m", "", eval_text(wide, Terminal()))  # a terminal gets styles
    assert max(len(line) for line in out.splitlines()) <= 40
    assert not all(h in out for h in HEADERS)  # a terminal this narrow cannot show every header whole


def _station_stock(v: verify.Verification):
    return next(c for c in v.reports if c.name == "station_stock")


@pytest.fixture(scope="module")
def revision_2(tmp_path_factory) -> verify.Verification:
    folder = tmp_path_factory.mktemp("bikeshare-data")
    demo_data.write_demo_data(folder)
    return verify.verify(compare.compare_specs(str(MODEL), str(REVISION_2)), data_dir=str(folder))


def _rows_whole(text: str, v: verify.Verification) -> bool:
    """Whether each difference shown has all its cells, in order, on one line of `text`."""
    c = _station_stock(v)
    lines = text.splitlines()
    for d in verify_out._shown(c.differences, 3):
        cells = verify_out.cells(c, d)
        if not any(_in_order(line, cells) for line in lines):
            return False
    return True


def _in_order(line: str, cells: list[str]) -> bool:
    at = 0
    for cell in cells:
        at = line.find(cell, at)
        if at < 0:
            return False
        at += len(cell)
    return True


def test_verify_piped_wraps_no_value_inside_a_cell(revision_2, monkeypatch):
    monkeypatch.setenv("COLUMNS", "50")
    monkeypatch.delenv("FORCE_COLOR", raising=False)
    out = io.StringIO()
    verify_out.as_text(revision_2, out, limit=3)
    assert _rows_whole(out.getvalue(), revision_2)
    assert "station_stock: MOVED" in out.getvalue()


def test_verify_on_a_narrow_terminal_folds_cells_to_fit(revision_2, monkeypatch):
    monkeypatch.setenv("COLUMNS", "50")
    out = Terminal()
    verify_out.as_text(revision_2, out, limit=3)
    assert not _rows_whole(out.getvalue(), revision_2)


# --- eval REV:PATH -------------------------------------------------------------------------------------


@pytest.fixture
def repo(tmp_path, monkeypatch, wide) -> Path:
    isolate_git(monkeypatch, tmp_path)
    work = init_repo(tmp_path / "work")
    (work / "data").mkdir()
    for path in (wide.parent / "data").iterdir():
        (work / "data" / path.name).write_text(path.read_text())
    (work / "wide.model.yaml").write_text(WIDE)
    git(work, "add", "-A")
    git(work, "commit", "-q", "-m", "wide model")
    # the working tree then renames a measure: REV:PATH must read the committed one
    (work / "wide.model.yaml").write_text(WIDE.replace("appointments_booked_in_total", "bookings"))
    monkeypatch.chdir(work)
    return work


def test_eval_reads_a_model_at_a_revision(repo):
    out = eval_text("HEAD:wide.model.yaml", io.StringIO())
    assert "appointments_booked_in_total" in out and "bookings" not in out
    assert CLINIC_NAME in out  # its tables' sources found beside PATH


def test_eval_of_the_working_file_reads_the_working_file(repo):
    out = eval_text("wide.model.yaml", io.StringIO())
    assert "bookings" in out and "appointments_booked_in_total" not in out


def test_eval_of_a_revision_that_lacks_the_path_is_one_line_exit_2(repo):
    err = io.StringIO()
    code = main(["eval", "HEAD:nowhere.model.yaml"], stdout=io.StringIO(), stderr=err)
    assert code == 2 and len(err.getvalue().strip().splitlines()) == 1
