#!/usr/bin/env python3
"""Write the fuzz targets' seed corpora (fuzz/seeds/) from real fieldcage output.

- import_tables: table files of the exported demo season (demo_data/season/):
  the setup tables, the setup with a few visits and their records, and single
  record tables without their parents. Format: chunks separated by a NUL byte,
  each "<file name>\\n<content>" (see fieldcage_testkit::fuzz_checks::import_file_set).
- changeset_reader: slices of the change-set that `fieldcage sync` writes for
  the demo season, each with its header's range and row count set to the
  slice and a fresh SHA-256 trailer.

Run from the repository root:  python3 fuzz/make_seeds.py target/debug/fieldcage
Standard library only.
"""

import csv
import hashlib
import io
import pathlib
import subprocess
import sys
import tempfile

ROOT = pathlib.Path(__file__).resolve().parent.parent
SEASON = ROOT / "demo_data" / "season"
SEEDS = ROOT / "fuzz" / "seeds"

SETUP = [
    "experiment", "site", "block", "treatment", "enclosure", "assignment", "taxon",
    "scale", "scale_class", "cover_protocol", "damage_protocol", "ground_category",
    "schedule_entry", "stocking_plan",
]


def table(name):
    text = (SEASON / f"{name}.csv").read_text(encoding="utf-8")
    rows = list(csv.reader(io.StringIO(text, newline="")))
    return rows[0], rows[1:]


def csv_text(header, rows):
    out = io.StringIO(newline="")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return out.getvalue()


def file_set(files):
    return b"\0".join(f"{name}.csv\n{text}".encode() for name, text in files)


def import_seeds():
    setup = [(n, (SEASON / f"{n}.csv").read_text(encoding="utf-8")) for n in SETUP]
    yield "setup", file_set(setup)
    vh, visits = table("visit")
    chosen = visits[:2] + [v for v in visits if v[vh.index("kind")] == "cover"][:1]
    ids = {v[0] for v in chosen}
    records = []
    for name in ["stocking_event", "census", "cover_record"]:
        h, rows = table(name)
        records.append((name, csv_text(h, [r for r in rows if r[h.index("visit_id")] in ids])))
    yield "setup_and_visits", file_set(setup + [("visit", csv_text(vh, chosen))] + records)
    for name in ["census", "cover_record", "damage_record", "tagged_leaf", "flag"]:
        h, rows = table(name)
        yield f"{name}_alone", file_set([(name, csv_text(h, rows[:3]))])


def changeset_seeds(fieldcage):
    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        db, target = tmp / "demo.db", tmp / "target"
        target.mkdir()
        subprocess.run([fieldcage, "demo", "--db", db], check=True, capture_output=True)
        subprocess.run([fieldcage, "sync", "--db", db, "--target", target], check=True,
                       capture_output=True)
        files = sorted(target.glob("*/*.csv"))
        text = files[0].read_bytes().decode("utf-8")
    body = text[: text.rindex("sha256,")]
    rows = list(csv.reader(io.StringIO(body, newline="")))
    header, columns, changes = rows[0], rows[1], rows[2:]

    def sliced(start, count):
        part = changes[start:start + count]
        first, last = int(part[0][0]), int(part[-1][0])
        head = [f"seq={first}-{last}" if c.startswith("seq=") else
                f"rows={len(part)}" if c.startswith("rows=") else c for c in header]
        out = io.StringIO(newline="")
        w = csv.writer(out, lineterminator="\n")
        w.writerow(head)
        w.writerow(columns)
        w.writerows(part)
        data = out.getvalue().encode("utf-8")
        return data + f"sha256,{hashlib.sha256(data).hexdigest()}\n".encode()

    yield "first_rows", sliced(0, 12)
    # The first entry of each table and operation of the field records, and
    # of every operation other than insert.
    records = {"visit", "stocking_event", "census", "cover_record", "tagged_leaf",
               "damage_record", "flag"}
    seen = set()
    for i, row in enumerate(changes):
        kind = (row[2], row[4])
        if kind not in seen and (row[2] in records or row[4] != "insert"):
            seen.add(kind)
            yield f"{row[2]}_{row[4]}", sliced(i, 6)


def main():
    fieldcage = sys.argv[1]
    for target, seeds in [("import_tables", import_seeds()),
                          ("changeset_reader", changeset_seeds(fieldcage))]:
        folder = SEEDS / target
        folder.mkdir(parents=True, exist_ok=True)
        for old in folder.iterdir():
            old.unlink()
        for name, data in seeds:
            (folder / name).write_bytes(data)
            print(f"{folder.relative_to(ROOT)}/{name}: {len(data)} bytes")


if __name__ == "__main__":
    main()
