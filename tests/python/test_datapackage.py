"""The exported data package, checked by independent readers.

frictionless (the reference implementation of the Frictionless Data specs)
validates every table, the data tables and the derived analysis tables, against
its own Table Schema, including types, constraints, primary keys and foreign
keys between resources. pandas reads every table with the declared types.
"""

import csv
import json
import os
import subprocess
from pathlib import Path

import frictionless
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("FIELDCAGE_BIN", ROOT / "target" / "debug" / "fieldcage"))
SCHEMAS = ROOT / "schemas" / "tables"
STORED = sorted(p.stem for p in SCHEMAS.glob("*.json"))
ANALYSIS = sorted(p.stem for p in (SCHEMAS / "analysis").glob("*.json"))


def shipped_schema(name: str) -> dict:
    path = SCHEMAS / f"{name}.json" if name in STORED else SCHEMAS / "analysis" / f"{name}.json"
    return json.loads(path.read_text(encoding="utf-8"))


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
    # One resource per data table (schemas/tables) and per analysis table
    # (schemas/tables/analysis).
    assert STORED and len(ANALYSIS) == 10
    assert sorted(task.name for task in report.tasks) == sorted(STORED + ANALYSIS)


def test_shipped_demo_season_is_a_valid_data_package():
    report = validate(ROOT / "demo_data" / "season")
    assert report.valid, [e.message for task in report.tasks for e in task.errors][:10]


def test_every_resource_schema_is_the_shipped_table_schema(fresh_export):
    package = json.loads((fresh_export / "datapackage.json").read_text(encoding="utf-8"))
    for resource in package["resources"]:
        shipped = shipped_schema(resource["name"])
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


def test_validator_catches_a_broken_analysis_value(fresh_export, tmp_path):
    """The analysis tables are checked too: a negative richness is reported."""
    broken = tmp_path / "broken"
    broken.mkdir()
    for f in fresh_export.iterdir():
        (broken / f.name).write_bytes(f.read_bytes())
    rows = (broken / "diversity.csv").read_text(encoding="utf-8").splitlines()
    header = rows[0].split(",")
    cells = rows[1].split(",")
    cells[header.index("richness")] = "-1"  # minimum 0 (schemas/tables/analysis/diversity.json)
    rows[1] = ",".join(cells)
    (broken / "diversity.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    report = validate(broken)
    assert not report.valid
    assert {task.name for task in report.tasks if not task.valid} == {"diversity"}


PANDAS_TYPES = {"string": "string", "integer": "Int64", "number": "float64", "boolean": "boolean"}


@pytest.mark.parametrize("folder", ["fresh", "shipped"])
def test_pandas_reads_every_table_with_the_declared_types(folder, fresh_export):
    root = fresh_export if folder == "fresh" else ROOT / "demo_data" / "season"
    package = json.loads((root / "datapackage.json").read_text(encoding="utf-8"))
    assert sorted(r["name"] for r in package["resources"]) == sorted(STORED + ANALYSIS)
    for resource in package["resources"]:
        fields = resource["schema"]["fields"]
        dtypes = {f["name"]: PANDAS_TYPES.get(f["type"], "string") for f in fields}
        # Only an empty cell is missing (missingValues [""]): a code like "NA"
        # or "+" stays text.
        df = pd.read_csv(root / resource["path"], dtype=dtypes, keep_default_na=False, na_values=[""])
        assert list(df.columns) == [f["name"] for f in fields], resource["name"]
        for f in fields:
            column = df[f["name"]]
            where = f"{resource['name']}.{f['name']}"
            if f["type"] in PANDAS_TYPES:
                assert str(column.dtype) == dtypes[f["name"]], where
            elif f["type"] == "date":
                parsed = pd.to_datetime(column, format="%Y-%m-%d", errors="raise")
                assert parsed.notna().sum() == column.notna().sum(), where
            elif f["type"] == "datetime":
                parsed = pd.to_datetime(column, format="ISO8601", utc=True, errors="raise")
                assert parsed.notna().sum() == column.notna().sum(), where
            if f.get("constraints", {}).get("required"):
                assert column.notna().all(), where
