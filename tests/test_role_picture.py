"""`modeldiff graph --security` and `--role R`: the security graph, and one role's reach marked in every format.

The clinic test model: role clinic_staff filters clinic_access; access_clinic is two-way for filters and for
row security, so the filter reaches clinics, then appointments (appointments_clinic), then the diagnoses bridge
(diagnoses_appointment: two-way for filters, one way for roles). doctors_clinic stands by, so doctors stays
out of reach; calendar, patients, invoices, diagnoses are never reached (semantics.md section 3).
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest

from modeldiff import cli, picture
from modeldiff.load import load_path
from modeldiff.render.svg import svg_of

CLINIC = Path(__file__).parent / "fixtures" / "clinic.model.yaml"
RESTRICTED = {"clinics", "appointments", "appointment_diagnoses"}
TRAVELLED = {"access_clinic", "appointments_clinic", "diagnoses_appointment"}


@pytest.fixture(scope="module")
def clinic():
    return load_path(str(CLINIC)).model


def run(*argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    return cli.main(["graph", str(CLINIC), *argv], stdout=out, stderr=err), out.getvalue(), err.getvalue()


def test_a_role_marks_its_filtered_and_restricted_tables_and_travelled_links(clinic):
    pic = picture.role_picture(clinic, "clinic_staff")
    assert {n.table for n in pic.nodes if n.role == "filter"} == {"clinic_access"}
    assert {n.table for n in pic.nodes if n.role == "restricted"} == RESTRICTED
    assert {a.link for a in pic.arrows if a.travelled} == TRAVELLED
    assert pic.setting == "row security of role clinic_staff: filters clinic_access, which restrict 3 more tables"


def test_the_plain_graph_marks_no_role(clinic):  # twin
    pic = picture.picture(clinic)
    assert all(n.role == "" for n in pic.nodes) and not any(a.travelled for a in pic.arrows)
    assert "rolefilter" not in picture.mermaid_of(pic) and "travelled" not in svg_of(pic)


def test_the_security_graph_draws_row_security_not_filters(clinic):
    pic = picture.picture(clinic, security=True)
    styles = {a.link: a.style for a in pic.arrows}
    labels = {a.link: a.label for a in pic.arrows}
    assert styles["access_clinic"] == "two-way"  # security_flow two-way
    assert styles["diagnoses_appointment"] == "one-way"  # two-way for filters only
    assert labels["diagnoses_appointment"] == "diagnoses_appointment (one way for roles)"
    assert styles["doctors_clinic"] == "standby" and labels["doctors_clinic"] == "doctors_clinic (standby)"
    default = {a.link: a.style for a in picture.picture(clinic).arrows}
    assert default["diagnoses_appointment"] == "two-way"  # the twin: the filter graph draws it both ways


def mermaid_class(source: str, name: str) -> set[str]:
    found = set()
    for line in source.splitlines():
        parts = line.split()
        if parts[:1] == ["class"] and parts[-1] == name:
            found |= {t.removeprefix("t_") for t in parts[1].split(",")}
    return found


def test_every_format_shows_the_role(clinic):
    code, mermaid, err = run("--role", "clinic_staff")
    assert (code, err) == (0, "")
    assert mermaid_class(mermaid, "rolefilter") == {"clinic_access"} and mermaid_class(mermaid, "restricted") == RESTRICTED
    arrows = [m.group(1) for m in re.finditer(r'\|"(\w+)[^"]*"\|', mermaid)]
    styled = [arrows[int(i)] for i in re.findall(r"linkStyle (\d+) stroke:#6a1b9a", mermaid)]
    assert set(styled) == TRAVELLED

    _, dot, _ = run("--role", "clinic_staff", "--format", "dot")
    purple_nodes = set(re.findall(r't_(\w+) \[label="\w+", [^\]]*color="#6a1b9a"', dot))
    assert purple_nodes == RESTRICTED | {"clinic_access"}
    assert set(re.findall(r'label="(\w+)[^"]*"[^\]]*color="#6a1b9a"', dot.split("->", 1)[1])) <= TRAVELLED
    assert len(re.findall(r'-> \w+ \[[^\]]*color="#6a1b9a"', dot)) == len(TRAVELLED)

    _, svg, _ = run("--role", "clinic_staff", "--format", "svg")
    assert set(re.findall(r'<g class="node role-restricted" data-table="(\w+)"', svg)) == RESTRICTED
    assert re.findall(r'<g class="node role-filter" data-table="(\w+)"', svg) == ["clinic_access"]
    assert set(re.findall(r'<g class="edge travelled" data-link="(\w+)"', svg)) == TRAVELLED

    _, text, _ = run("--role", "clinic_staff", "--format", "text")
    assert "  the role filters: clinic_access\n" in text
    assert "  its filters restrict: appointment_diagnoses, appointments, clinics\n" in text
    travelled = {line.split()[3] for line in text.splitlines() if line.endswith("* the role's filter travels here")}
    assert travelled == TRAVELLED


def test_security_without_a_role_marks_nothing():
    code, text, err = run("--security", "--format", "text")
    assert (code, err) == (0, "")
    assert "(security graph)" in text and "travels here" not in text and "the role filters" not in text
    assert "diagnoses_appointment (one way for roles)" in text


@pytest.mark.parametrize("argv, words", [(["--role", "nurse"], ["no role 'nurse'", "clinic_staff"]),
                                         (["--role", "clinic_staff", "--setting", "measure:invoiced"],
                                          ["--setting", "--role"])])
def test_bad_role_arguments_are_one_line(argv, words):
    code, out, err = run(*argv)
    assert code == 2 and out == "" and err.count("\n") == 1
    for word in words:
        assert word in err
