"""The exported data package, checked by an independent validator.

frictionless (the reference implementation of the Frictionless Data specs)
validates every table against its own Table Schema, including types,
constraints, primary keys and foreign keys between resources.
"""

import csv
import json
import os
import subprocess
from pathlib import Path

import frictionless
import pytest

ROOT = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("FIELDCAGE_BIN", ROOT / "target" / "debug" / "fieldcage"))


@pytest.fixture(scope="module")
def fresh_export(tmp_path_factory):
    """A fresh demo season exported by the fieldcage binary."""
    work = tmp_path_factory.mktemp("export")
    subprocess.run([BIN, "demo", "--db", work / "demo.db"], check=True, capture_output=True)
    subprocess.run([BIN, "export", "--db", work / "demo.db", "--out", work / "out"], check=True, capture_output=True)
    return work / "out"


def validate(folder: Path) -> frictionless.Report:
    return frictionless.validate(str(folder / "datapackage.json"))


def test_fresh_export_is_a_valid_data_package(fresh_export):
    report = validate(fresh_export)
    errors = [e.message for task in report.tasks for e in task.errors] + [e.message for e in report.errors]
    assert report.valid, errors[:10]
    assert len(report.tasks) == len(list((ROOT / "schemas" / "tables").glob("*.json")))  # one resource per table


def test_shipped_demo_season_is_a_valid_data_package():
    report = validate(ROOT / "demo_data" / "season")
    assert report.valid, [e.message for task in report.tasks for e in task.errors][:10]


def test_every_resource_schema_is_the_shipped_table_schema(fresh_export):
    package = json.loads((fresh_export / "datapackage.json").read_text(encoding="utf-8"))
    for resource in package["resources"]:
        shipped = json.loads((ROOT / "schemas" / "tables" / f"{resource['name']}.json").read_text(encoding="utf-8"))
        assert resource["schema"]["fields"] == shipped["fields"], resource["name"]
        with open(fresh_export / resource["path"], newline="", encoding="utf-8") as fh:
            header = next(csv.reader(fh))
        assert header == [f["name"] for f in shipped["fields"]], resource["name"]


def test_validator_catches_a_broken_value(fresh_export, tmp_path):
    """The check has teeth: an out-of-range cover value is reported."""
    broken = tmp_path / "broken"
    broken.mkdir()
    for f in fresh_export.iterdir():
        (broken / f.name).write_bytes(f.read_bytes())
    rows = (broken / "cover_record.csv").read_text(encoding="utf-8").splitlines()
    cells = rows[1].split(",")
    cells[7] = "120"  # cover_pct: maximum is 100 (schemas/tables/cover_record.json)
    rows[1] = ",".join(cells)
    (broken / "cover_record.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    report = validate(broken)
    assert not report.valid
    codes = {e.type for task in report.tasks for e in task.errors}
    assert "constraint-error" in codes
