//! Export and import of the hand-off folder: byte-exact round trip, the exact
//! CSV bytes, the data package descriptor, and imports that must be refused
//! without writing anything.

use crate::util::Raw;
use std::fs;
use std::path::{Path, PathBuf};

use chrono::{DateTime, NaiveDate};
use fieldcage_core::export::{self, ExportSummary};
use fieldcage_core::import::{self, MAX_FILE_BYTES};
use fieldcage_core::model::*;
use fieldcage_core::{Store, tables};
use tempfile::TempDir;

/// A small experiment recorded through the public write path.
struct Fixture {
    _dir: TempDir,
    root: PathBuf,
    store: Store,
    visit: VisitId,
    slug: TaxonId,
    cover: Vec<CoverRecordId>,
}

fn fixture() -> Fixture {
    let dir = TempDir::new().expect("temp dir");
    let root = dir.path().to_path_buf();
    let mut store = Store::open(root.join("source.sqlite")).expect("open store");
    // Seeded ids increase with each new id, so rows sort in creation order.
    store.use_seeded_ids(11, 1_767_225_600_000);
    let (visit, slug, cover) = store
        .write(|w| {
            let experiment = ExperimentId(w.new_id());
            w.insert(&Experiment {
                id: experiment,
                code: "Meadow-A".into(),
                title: "Wet meadow cage trial".into(),
                start_date: date("2026-05-04"),
                end_date: Some(date("2026-06-03")),
                utc_offset: "+02:00".into(),
                design: Design::Rcbd,
                randomisation_seed: Some(42),
                notes: None,
            })?;
            let site = SiteId(w.new_id());
            w.insert(&Site {
                id: site,
                experiment_id: experiment,
                code: "S1".into(),
                name: "Lower meadow".into(),
                latitude: Some(52.25),
                longitude: Some(-3.5),
                notes: Some("+1 plot moved".into()),
            })?;
            let block = BlockId(w.new_id());
            w.insert(&Block {
                id: block,
                site_id: site,
                code: "B1".into(),
                notes: None,
            })?;
            let treatment = TreatmentId(w.new_id());
            w.insert(&Treatment {
                id: treatment,
                experiment_id: experiment,
                code: "SB".into(),
                name: "slugs + beetle".into(),
                herbivores: true,
                predator_mode: PredatorMode::Lethal,
                notes: None,
            })?;
            let enclosure = EnclosureId(w.new_id());
            w.insert(&Enclosure {
                id: enclosure,
                block_id: block,
                label: "C-01".into(),
                area_m2: 0.5,
                height_m: Some(1.0),
                mesh_mm: Some(1.5),
                x_m: None,
                y_m: None,
                notes: None,
            })?;
            let taxon = |w: &mut fieldcage_core::store::Writer<'_>,
                         code: &str,
                         name: &str,
                         role: Role,
                         group: Option<PlantGroup>| {
                let id = TaxonId(w.new_id());
                w.insert(&Taxon {
                    id,
                    experiment_id: experiment,
                    code: code.into(),
                    scientific_name: name.into(),
                    common_name: None,
                    role,
                    plant_group: group,
                    notes: None,
                })
                .map(|()| id)
            };
            let slug = taxon(w, "SLUG", "Limax testus", Role::Herbivore, None)?;
            let beetle = taxon(w, "BEET", "Carabus testus", Role::Predator, None)?;
            let grass = taxon(w, "GRA", "Poa testa", Role::Plant, Some(PlantGroup::Grass))?;
            let clover = taxon(
                w,
                "CLO",
                "Trifolium testum",
                Role::Plant,
                Some(PlantGroup::Legume),
            )?;
            let census_visit = VisitId(w.new_id());
            w.insert(&Visit {
                id: census_visit,
                enclosure_id: enclosure,
                kind: VisitKind::Census,
                day: Some(3),
                visited_at: DateTime::parse_from_rfc3339("2026-05-07T09:15:00+02:00")
                    .expect("timestamp"),
                observer: Some("crew 1".into()),
                device: None,
                completed: true,
                notes: None,
            })?;
            for (taxon, alive, dead, missing) in [(slug, 8, 1, 1), (beetle, 1, 0, 0)] {
                let id = CensusId(w.new_id());
                w.insert(&Census {
                    id,
                    visit_id: census_visit,
                    taxon_id: taxon,
                    alive: Some(alive),
                    dead: Some(dead),
                    missing: Some(missing),
                    notes: None,
                })?;
            }
            let cover_visit = VisitId(w.new_id());
            w.insert(&Visit {
                id: cover_visit,
                enclosure_id: enclosure,
                kind: VisitKind::Cover,
                day: Some(14),
                visited_at: DateTime::parse_from_rfc3339("2026-05-18T10:00:00+02:00")
                    .expect("timestamp"),
                observer: None,
                device: None,
                completed: false,
                notes: None,
            })?;
            let rows: [(Option<TaxonId>, Option<&str>, f64, &str); 4] = [
                (Some(grass), None, 37.5, "=SUM(A1)"),
                (Some(clover), None, 2.5, "-3.5"),
                (None, Some("litter"), 0.0, "@x"),
                (None, Some("bare"), 12.0, "wet, \"muddy\"\nsoil"),
            ];
            let mut cover = Vec::new();
            for (taxon, category, pct, notes) in rows {
                let id = CoverRecordId(w.new_id());
                w.insert(&CoverRecord {
                    id,
                    visit_id: cover_visit,
                    taxon_id: taxon,
                    category: category.map(str::to_owned),
                    value_pct: Some(pct),
                    class_code: None,
                    pin_hits: None,
                    cover_pct: Some(pct),
                    notes: Some(notes.into()),
                })?;
                cover.push(id);
            }
            Ok((cover_visit, slug, cover))
        })
        .expect("fixture");
    Fixture {
        _dir: dir,
        root,
        store,
        visit,
        slug,
        cover,
    }
}

fn date(text: &str) -> NaiveDate {
    NaiveDate::parse_from_str(text, "%Y-%m-%d").expect("date")
}

/// Every file of a folder, by name.
fn folder_bytes(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut files: Vec<(String, Vec<u8>)> = fs::read_dir(dir)
        .expect("read folder")
        .map(|e| {
            let e = e.expect("entry");
            let name = e.file_name().to_string_lossy().into_owned();
            (name, fs::read(e.path()).expect("read file"))
        })
        .collect();
    files.sort();
    files
}

/// Stored rows (tombstones included) of every table, and change-log entries.
fn counts(store: &Store) -> Vec<(String, i64)> {
    let mut out: Vec<(String, i64)> = tables::all()
        .iter()
        .map(|t| {
            let n = store
                .raw()
                .query_row(&format!("SELECT count(*) FROM {}", t.name), [], |r| {
                    r.get(0)
                })
                .expect("count");
            (t.name.clone(), n)
        })
        .collect();
    out.push((
        "change_log".into(),
        store.change_count().expect("change count"),
    ));
    out
}

/// Export the fixture, let `edit` spoil the folder, import it into a fresh
/// database and return the error text after checking that nothing was written.
fn refused_import(edit: impl FnOnce(&Path, &Fixture)) -> String {
    let fx = fixture();
    let folder = fx.root.join("export");
    export::export(&fx.store, &folder).expect("export");
    edit(&folder, &fx);
    let mut fresh = Store::open(fx.root.join("fresh.sqlite")).expect("open fresh");
    let before = counts(&fresh);
    let err = import::import(&mut fresh, &folder).expect_err("import must be refused");
    let after = counts(&fresh);
    assert_eq!(before, after, "a refused import wrote something");
    // Zero rows everywhere: the database was fresh (common practice: all or nothing).
    assert!(after.iter().all(|(_, n)| *n == 0), "{after:?}");
    err.to_string()
}

fn read_text(path: &Path) -> String {
    fs::read_to_string(path).expect("read")
}

/// Replace one cell of an unquoted physical line (1-based; the header is 1).
fn set_cell(path: &Path, line: usize, column: &str, value: &str) {
    let text = read_text(path);
    let mut lines: Vec<String> = text.split('\n').map(str::to_owned).collect();
    let header: Vec<&str> = lines[0].split(',').collect();
    let i = header
        .iter()
        .position(|h| *h == column)
        .expect("column in header");
    let mut cells: Vec<String> = lines[line - 1].split(',').map(str::to_owned).collect();
    cells[i] = value.to_owned();
    lines[line - 1] = cells.join(",");
    fs::write(path, lines.join("\n")).expect("write");
}

#[test]
fn export_import_export_is_byte_identical() {
    let fx = fixture();
    let first = fx.root.join("first");
    let summary = export::export(&fx.store, &first).expect("export");
    // Fixture: 2 census rows, 4 cover rows, 2 visits, 4 taxa.
    let rows =
        |s: &ExportSummary, t: &str| s.tables.iter().find(|(name, _)| name == t).map(|(_, n)| *n);
    assert_eq!(rows(&summary, "census"), Some(2));
    assert_eq!(rows(&summary, "cover_record"), Some(4));
    assert_eq!(rows(&summary, "visit"), Some(2));
    assert_eq!(rows(&summary, "taxon"), Some(4));
    assert_eq!(rows(&summary, "damage_record"), Some(0));

    let mut copy = Store::open(fx.root.join("copy.sqlite")).expect("open copy");
    let imported = import::import(&mut copy, &first).expect("import");
    assert_eq!(imported.tables, summary.tables);

    let second = fx.root.join("second");
    export::export(&copy, &second).expect("export again");
    let a = folder_bytes(&first);
    let b = folder_bytes(&second);
    // One CSV per data and analysis table, datapackage.json and report.md,
    // and no temporary files left.
    let mut expected: Vec<String> = tables::all()
        .iter()
        .chain(tables::analysis())
        .map(|t| format!("{}.csv", t.name))
        .collect();
    expected.push("datapackage.json".into());
    expected.push("report.md".into());
    expected.sort();
    let names: Vec<&String> = a.iter().map(|(n, _)| n).collect();
    assert_eq!(names, expected.iter().collect::<Vec<_>>());
    for ((name_a, bytes_a), (name_b, bytes_b)) in a.iter().zip(&b) {
        assert_eq!(name_a, name_b);
        assert!(
            bytes_a == bytes_b,
            "{name_a} differs after the round trip:\n{}\n---\n{}",
            String::from_utf8_lossy(bytes_a),
            String::from_utf8_lossy(bytes_b)
        );
    }
    assert_eq!(a.len(), b.len());

    // Exporting the same data again over the first folder changes nothing.
    export::export(&fx.store, &first).expect("export over itself");
    assert!(folder_bytes(&first) == a);
}

#[test]
fn cover_record_csv_is_exact() {
    let fx = fixture();
    let folder = fx.root.join("export");
    export::export(&fx.store, &folder).expect("export");
    let v = fx.visit;
    let taxa: Vec<String> = fx
        .store
        .list::<CoverRecord>()
        .expect("cover rows")
        .iter()
        .map(|r| r.taxon_id.map(|t| t.to_string()).unwrap_or_default())
        .collect();
    let c = &fx.cover;
    // Header = schema field names; LF line ends (our dialect, stated in
    // datapackage.json); no byte-order mark.
    // RFC 4180 §2.6–2.7: a value with a comma, quote or line break is quoted
    // and its quotes doubled; other values are not quoted.
    // OWASP "CSV Injection": text starting with = - @ gets a leading ';
    // numbers stay as they are (37.5, 2.5, 0, 12).
    let expected = format!(
        "id,visit_id,taxon_id,category,value_pct,class_code,pin_hits,cover_pct,notes\n\
         {c0},{v},{t0},,37.5,,,37.5,'=SUM(A1)\n\
         {c1},{v},{t1},,2.5,,,2.5,'-3.5\n\
         {c2},{v},,litter,0,,,0,'@x\n\
         {c3},{v},,bare,12,,,12,\"wet, \"\"muddy\"\"\nsoil\"\n",
        c0 = c[0],
        c1 = c[1],
        c2 = c[2],
        c3 = c[3],
        t0 = taxa[0],
        t1 = taxa[1],
    );
    let bytes = fs::read(folder.join("cover_record.csv")).expect("read");
    assert_eq!(String::from_utf8(bytes).expect("UTF-8"), expected);

    // OWASP "CSV Injection": text "+1 plot moved" → "'+1 plot moved";
    // number -3.5 stays "-3.5" (numbers are never altered).
    let site = read_text(&folder.join("site.csv"));
    let mut lines = site.lines();
    assert_eq!(
        lines.next(),
        Some("id,experiment_id,code,name,latitude,longitude,notes")
    );
    let row = lines.next().expect("site row");
    assert!(
        row.ends_with(",S1,Lower meadow,52.25,-3.5,'+1 plot moved"),
        "{row}"
    );
    assert_eq!(lines.next(), None);
}

#[test]
fn datapackage_describes_every_table() {
    let fx = fixture();
    let folder = fx.root.join("export");
    export::export(&fx.store, &folder).expect("export");
    let text = read_text(&folder.join("datapackage.json"));
    let package: serde_json::Value = serde_json::from_str(&text).expect("JSON");
    // Frictionless Data Package: tabular profile, lower-case name.
    assert_eq!(package["profile"], "tabular-data-package");
    assert_eq!(package["name"], "meadow-a"); // fixture code "Meadow-A", lower-cased
    assert_eq!(package["title"], "Wet meadow cage trial");
    assert!(!text.contains("$schema"));
    let resources = package["resources"].as_array().expect("resources");
    let names: Vec<&str> = resources
        .iter()
        .map(|r| r["name"].as_str().expect("name"))
        .collect();
    let stored: Vec<&str> = tables::all().iter().map(|t| t.name.as_str()).collect();
    let derived: Vec<&str> = tables::analysis().iter().map(|t| t.name.as_str()).collect();
    // Every data table in dependency order, then every analysis table.
    assert_eq!(names, [stored.clone(), derived].concat());
    for r in resources {
        let name = r["name"].as_str().expect("name");
        // Frictionless Tabular Data Resource properties.
        assert_eq!(r["path"], format!("{name}.csv"));
        assert_eq!(r["profile"], "tabular-data-resource");
        assert_eq!(r["format"], "csv");
        assert_eq!(r["mediatype"], "text/csv");
        assert_eq!(r["encoding"], "utf-8");
        assert_eq!(r["dialect"]["lineTerminator"], "\n"); // CSV Dialect spec
        assert!(r["schema"].get("uniqueKeys").is_none());
        let fields: Vec<&str> = r["schema"]["fields"]
            .as_array()
            .expect("fields")
            .iter()
            .map(|f| f["name"].as_str().expect("field name"))
            .collect();
        let csv = read_text(&folder.join(format!("{name}.csv")));
        let header = csv.split('\n').next().expect("header");
        assert_eq!(fields.join(","), header, "{name}");
        let key = if stored.contains(&name) {
            serde_json::json!(["id"])
        } else {
            serde_json::json!(
                tables::get_analysis(name)
                    .expect("analysis table")
                    .primary_key
            )
        };
        assert_eq!(r["schema"]["primaryKey"], key, "{name}");
        // Foreign keys point at resources of this package (Table Schema).
        for fk in r["schema"]["foreignKeys"].as_array().into_iter().flatten() {
            let target = fk["reference"]["resource"].as_str().expect("resource");
            assert!(names.contains(&target), "{name} refers to {target}");
        }
    }
    // Deterministic: no timestamp, so a second export gives the same bytes.
    let again = fx.root.join("again");
    export::export(&fx.store, &again).expect("export");
    assert_eq!(text, read_text(&again.join("datapackage.json")));
}

#[test]
fn import_refuses_missing_column() {
    let err = refused_import(|dir, _| {
        let path = dir.join("census.csv");
        let text = read_text(&path);
        // Drop the third column (taxon_id) from every line; census has no quotes.
        let cut: Vec<String> = text
            .split('\n')
            .map(|line| {
                let mut cells: Vec<&str> = line.split(',').collect();
                if cells.len() > 2 {
                    cells.remove(2);
                }
                cells.join(",")
            })
            .collect();
        fs::write(&path, cut.join("\n")).expect("write");
    });
    // Header problems are on line 1 (common practice: the header is line 1).
    assert!(err.starts_with("census.csv:1:taxon_id:"), "{err}");
    assert!(err.contains("missing"), "{err}");
}

#[test]
fn import_refuses_unknown_column() {
    let err = refused_import(|dir, _| {
        let path = dir.join("census.csv");
        let text = read_text(&path);
        let widened: Vec<String> = text
            .split('\n')
            .enumerate()
            .map(|(n, line)| match (n, line.is_empty()) {
                (_, true) => String::new(),
                (0, _) => format!("{line},colour"),
                _ => format!("{line},red"),
            })
            .collect();
        fs::write(&path, widened.join("\n")).expect("write");
    });
    assert!(err.starts_with("census.csv:1:colour:"), "{err}"); // header line 1
    assert!(err.contains("not a column"), "{err}");
}

#[test]
fn import_refuses_wrong_type() {
    let err = refused_import(|dir, _| set_cell(&dir.join("census.csv"), 3, "alive", "abc"));
    // Table Schema: alive is an integer; "abc" is on line 3 (second data row).
    assert!(err.starts_with("census.csv:3:alive:"), "{err}");
    assert!(err.contains("\"abc\""), "{err}");
    assert!(err.contains("whole number"), "{err}");
}

#[test]
fn import_refuses_out_of_range_value() {
    let err = refused_import(|dir, _| {
        set_cell(&dir.join("cover_record.csv"), 2, "cover_pct", "120");
    });
    // Table Schema constraint maximum 100 (cover is a percentage).
    assert!(err.starts_with("cover_record.csv:2:cover_pct:"), "{err}");
    assert!(err.contains("\"120\""), "{err}");
    assert!(err.contains("maximum 100"), "{err}");
}

#[test]
fn import_refuses_unknown_foreign_key() {
    let err = refused_import(|dir, _| {
        // A well-formed UUIDv7 that names no taxon (Table Schema foreignKeys).
        set_cell(
            &dir.join("census.csv"),
            2,
            "taxon_id",
            "01900000-0000-7000-8000-000000000000",
        );
    });
    assert!(err.starts_with("census.csv:2:taxon_id:"), "{err}");
    assert!(err.contains("refers to no taxon"), "{err}");
}

#[test]
fn import_refuses_duplicate_primary_key() {
    let err = refused_import(|dir, _| {
        let path = dir.join("census.csv");
        let text = read_text(&path);
        let second = text.split('\n').nth(1).expect("row").to_owned();
        fs::write(&path, format!("{text}{second}\n")).expect("write");
    });
    // Table Schema primaryKey: the copy on line 4 repeats the id of line 2.
    assert!(err.starts_with("census.csv:4:id:"), "{err}");
    assert!(err.contains("line 2"), "{err}");
}

#[test]
fn import_refuses_non_utf8() {
    let err = refused_import(|dir, _| {
        let path = dir.join("census.csv");
        let mut text = read_text(&path).into_bytes();
        // The third line ends with an empty notes cell; put 0xFF in it.
        let line_ends: Vec<usize> = text
            .iter()
            .enumerate()
            .filter(|(_, b)| **b == b'\n')
            .map(|(i, _)| i)
            .collect();
        text.splice(line_ends[2]..line_ends[2], [0xFF, b'x']);
        fs::write(&path, text).expect("write");
    });
    // 0xFF never occurs in UTF-8 (RFC 3629).
    assert!(err.starts_with("census.csv:3:notes:"), "{err}");
    assert!(err.contains("is not UTF-8"), "{err}");
}

#[test]
fn import_refuses_truncated_quoted_value() {
    let err = refused_import(|dir, fx| {
        let path = dir.join("census.csv");
        let text = read_text(&path);
        // The file ends inside a quoted value that started on line 4 (RFC 4180 §2.5).
        let cut = format!(
            "{text}01900000-0000-7000-8000-0000000000aa,{},{},1,0,0,\"counted twice,\nthen",
            fx.visit, fx.slug
        );
        fs::write(&path, cut).expect("write");
    });
    assert!(err.starts_with("census.csv:4:notes:"), "{err}");
    assert!(err.contains("never closed"), "{err}");
}

#[test]
fn import_refuses_row_with_wrong_number_of_values() {
    let err = refused_import(|dir, _| {
        let path = dir.join("census.csv");
        let text = read_text(&path);
        // Drop the last cell (notes) of line 3: RFC 4180 §2.4, every record has
        // the same number of fields.
        let lines: Vec<String> = text
            .split('\n')
            .enumerate()
            .map(|(n, l)| {
                if n == 2 {
                    l.rsplit_once(',')
                        .map(|(a, _)| a.to_owned())
                        .unwrap_or_default()
                } else {
                    l.to_owned()
                }
            })
            .collect();
        fs::write(&path, lines.join("\n")).expect("write");
    });
    assert!(err.starts_with("census.csv:3:notes:"), "{err}");
}

#[test]
fn import_refuses_rows_already_present() {
    let mut fx = fixture();
    let folder = fx.root.join("export");
    export::export(&fx.store, &folder).expect("export");
    let before = counts(&fx.store);
    let err = import::import(&mut fx.store, &folder).expect_err("duplicate ids");
    assert_eq!(
        counts(&fx.store),
        before,
        "a refused import wrote something"
    );
    // The first row of the first table already exists (ids are unique).
    assert!(err.to_string().starts_with("experiment.csv:2:id:"), "{err}");
    assert!(err.to_string().contains("already used"), "{err}");
}

#[test]
fn import_refuses_oversized_file() {
    let err = refused_import(|dir, _| {
        // A sparse file one byte over the limit: measured, never read.
        fs::File::create(dir.join("cover_record.csv"))
            .and_then(|f| f.set_len(MAX_FILE_BYTES + 1))
            .expect("sparse file");
    });
    assert!(err.contains("cover_record.csv"), "{err}");
    assert!(err.contains("512 MiB"), "{err}"); // our documented bound
}

#[test]
fn import_accepts_columns_in_any_order_and_missing_files() {
    let fx = fixture();
    let folder = fx.root.join("export");
    export::export(&fx.store, &folder).expect("export");
    // Swap two columns of census.csv (Table Schema maps columns by name when
    // the header is present) and remove a table that has no rows.
    let path = folder.join("census.csv");
    let text = read_text(&path);
    let swapped: Vec<String> = text
        .split('\n')
        .map(|line| {
            let mut cells: Vec<&str> = line.split(',').collect();
            if cells.len() > 4 {
                cells.swap(3, 4);
            }
            cells.join(",")
        })
        .collect();
    fs::write(&path, swapped.join("\n")).expect("write");
    fs::remove_file(folder.join("damage_record.csv")).expect("remove");
    let mut copy = Store::open(fx.root.join("copy.sqlite")).expect("open");
    import::import(&mut copy, &folder).expect("import");
    // Same census values as recorded in the fixture (alive 8, dead 1, missing 1).
    let census = copy.list::<Census>().expect("census");
    let slug = census
        .iter()
        .find(|c| c.taxon_id == fx.slug)
        .expect("slug census");
    assert_eq!(
        (slug.alive, slug.dead, slug.missing),
        (Some(8), Some(1), Some(1))
    );
    // Text comes back without its formula-injection prefix (OWASP "CSV Injection").
    let notes: Vec<Option<String>> = copy
        .list::<CoverRecord>()
        .expect("cover")
        .into_iter()
        .map(|r| r.notes)
        .collect();
    assert_eq!(notes[0].as_deref(), Some("=SUM(A1)"));
    assert_eq!(notes[3].as_deref(), Some("wet, \"muddy\"\nsoil"));
}

#[test]
fn import_counts_lines_across_quoted_line_breaks() {
    let err = refused_import(|dir, _| {
        let path = dir.join("cover_record.csv");
        let text = read_text(&path);
        // Rows on lines 2, 3, 4 and 5–6 (a quoted note with a line break,
        // RFC 4180 §2.6); a copy of line 2 appended lands on line 7.
        let second = text.split('\n').nth(1).expect("row").to_owned();
        fs::write(&path, format!("{text}{second}\n")).expect("write");
    });
    assert!(err.starts_with("cover_record.csv:7:id:"), "{err}");
    assert!(err.contains("line 2"), "{err}");
}

#[test]
fn import_reads_crlf_and_byte_order_mark() {
    let fx = fixture();
    let folder = fx.root.join("export");
    export::export(&fx.store, &folder).expect("export");
    // What a spreadsheet may save: a UTF-8 byte-order mark and CRLF line
    // ends (RFC 4180 §2.1 uses CRLF).
    for name in ["census.csv", "cover_record.csv"] {
        let path = folder.join(name);
        let text = read_text(&path).replace('\n', "\r\n");
        fs::write(&path, format!("\u{FEFF}{text}")).expect("write");
    }
    let mut copy = Store::open(fx.root.join("copy.sqlite")).expect("open");
    let summary = import::import(&mut copy, &folder).expect("import");
    let rows = |t: &str| {
        summary
            .tables
            .iter()
            .find(|(name, _)| name == t)
            .map(|(_, n)| *n)
    };
    assert_eq!(rows("census"), Some(2)); // fixture: 2 census rows
    assert_eq!(rows("cover_record"), Some(4)); // fixture: 4 cover rows
    let first = copy.list::<Census>().expect("census");
    assert_eq!(first[0].id.to_string().len(), 36); // UUID text form (RFC 9562), no BOM left
    // The note's line break was inside quotes, so it keeps the file's CRLF
    // (RFC 4180 §2.6: quoted line breaks are data).
    let notes = copy.list::<CoverRecord>().expect("cover")[3].notes.clone();
    assert_eq!(notes.as_deref(), Some("wet, \"muddy\"\r\nsoil"));
}
