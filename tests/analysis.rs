//! Results for the analyst, end to end: from records in a store to the
//! analysis tables, the report and `fieldcage results`.

use std::collections::HashMap;
use std::path::Path;
use std::process::Command;

use chrono::{DateTime, Duration};
use fieldcage_core::Store;
use fieldcage_core::analysis::{self, Contrast, Options, Results};
use fieldcage_core::model::*;
use fieldcage_core::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};
use fieldcage_core::tables;

use crate::util::{Temp, demo_store, store_with};

fn demo_results(tmp: &Temp) -> (Store, Results) {
    let store = demo_store(tmp);
    let results = analysis::analyse(&store, &Options::default()).unwrap();
    (store, results)
}

fn mean(r: &Results, response: &str, day: i64, treatment: &str) -> f64 {
    r.treatment_summary
        .iter()
        .find(|s| s.response == response && s.day == day && s.treatment == treatment)
        .unwrap_or_else(|| panic!("no summary of {response} on day {day} for {treatment}"))
        .mean
}

#[test]
fn every_analysis_row_struct_fits_its_table_schema() {
    let tmp = Temp::new();
    let (_, results) = demo_results(&tmp);
    let all = analysis::tables::all(&results).unwrap();
    assert_eq!(all.len(), tables::analysis().len());
    for (schema, rows) in all {
        // Every analysis table has rows in the demo season, and each row has
        // a value (or NULL) for every column of its schema.
        assert!(!rows.is_empty(), "{} has no rows", schema.name);
        for row in &rows {
            assert_eq!(row.len(), schema.fields.len(), "{}", schema.name);
            for (field, value) in schema.fields.iter().zip(row) {
                field
                    .check(value)
                    .unwrap_or_else(|e| panic!("{}.{}: {e}", schema.name, field.name));
            }
        }
    }
}

#[test]
fn the_demo_results_are_plausible_for_its_invented_scenario() {
    let tmp = Temp::new();
    let (_, r) = demo_results(&tmp);
    // The invented toy (src/demo.rs): slugs alone damage most, a lethal beetle
    // least, risk in between, plants only little.
    let d = |t| mean(&r, "damage.index", 28, t);
    assert!(
        d("P") < d("SB") && d("SB") < d("SR") && d("SR") < d("S"),
        "damage index P {} SB {} SR {} S {}",
        d("P"),
        d("SB"),
        d("SR"),
        d("S")
    );
    // Slugs eat forbs and legumes: slugs alone leave the least, plants only the most.
    for group in ["cover.group.forb", "cover.group.legume"] {
        let c = |t| mean(&r, group, 28, t);
        assert!(
            c("S") < c("SR") && c("SR") < c("P") && c("SB") < c("P"),
            "{group}"
        );
    }
    // A lethal beetle kills slugs (toy rate 0.04 a day); sealed ones do not.
    let km = |t: &str| {
        r.survival_curve
            .iter()
            .rfind(|c| c.treatment == t && c.taxon == "SLUG")
            .unwrap()
            .survival
    };
    assert!(
        km("SB") < 0.5 && km("S") > 0.6 && km("SR") > 0.6,
        "{} {} {}",
        km("SB"),
        km("S"),
        km("SR")
    );
    let effect = |response: &str, day, contrast| {
        r.effect
            .iter()
            .find(|e| e.response == response && e.day == day && e.contrast == contrast)
            .unwrap()
    };
    // Slugs raise damage clearly: the whole interval lies above 0.
    let e = effect("damage.mean_pct", 28, Contrast::HerbivoresVsPlantsOnly);
    assert!(e.lrr.unwrap() > 0.0 && e.ci_low.unwrap() > 0.0, "{e:?}");
    // Both predators lower damage; the lethal one more.
    let lethal = effect("damage.index", 28, Contrast::LethalVsNoPredator);
    let risk = effect("damage.index", 28, Contrast::RiskVsNoPredator);
    assert!(lethal.lrr.unwrap() < risk.lrr.unwrap() && risk.lrr.unwrap() < 0.0);
    // Fear alone does part of the predator's work on damage: a share between 0 and 1.
    let split = r
        .predator_split
        .iter()
        .find(|s| s.response == "damage.index" && s.day == 28)
        .unwrap();
    let share = split.share.unwrap();
    assert!(0.2 < share && share < 0.9, "{split:?}");
    assert!(split.share_ci_low.unwrap() < share && share < split.share_ci_high.unwrap());
    assert_eq!(split.bootstrap_reps, 2000);
}

#[test]
fn planted_problems_show_in_the_data_handling_notes() {
    let tmp = Temp::new();
    let (_, r) = demo_results(&tmp);
    let notes = r.notes.join("\n");
    // demo_data/README.md: C-08 day 12 (12 alive where at most 10 can be),
    // C-16 day 21 (slug in a plants-only cage), C-24 day 27 (census twice).
    assert!(
        notes.contains("cage C-08, SLUG: day 12: 12 counted alive"),
        "{notes}"
    );
    assert!(
        notes.contains("cage C-16: SLUG found alive on day 21 but never stocked"),
        "{notes}"
    );
    // The stray slug is taken out again; that is no survival record either.
    assert!(
        notes.contains("cage C-16: SLUG removed on day 21 but never stocked"),
        "{notes}"
    );
    assert!(!r.cage_survival.iter().any(|c| c.cage.enclosure == "C-16"));
    assert!(
        notes.contains("cage C-24 has more than one census visit on day 27"),
        "{notes}"
    );
    // The cage with 12 counted keeps a proportion of at most 1.
    assert!(
        r.cage_survival
            .iter()
            .all(|c| c.proportion_recovered.unwrap_or(0.0) <= 1.0)
    );
}

#[test]
fn analysis_is_the_same_after_export_and_import() {
    let tmp = Temp::new();
    let (store, results) = demo_results(&tmp);
    let out = tmp.path("x");
    fieldcage_core::export::export(&store, &out).unwrap();
    let mut copy = tmp.store("copy.db");
    fieldcage_core::import::import(&mut copy, &out).unwrap();
    let again = analysis::analyse(&copy, &Options::default()).unwrap();
    assert!(results == again, "the imported season analyses differently");
}

/// Start a visit of `kind` on `day` at every cage and record `f(treatment
/// code, cage number within the treatment)` there.
fn record_everywhere(
    store: &mut Store,
    kind: VisitKind,
    day: i64,
    mut f: impl FnMut(
        &mut fieldcage_core::store::Writer<'_>,
        VisitId,
        EnclosureId,
        &str,
        usize,
    ) -> fieldcage_core::Result<()>,
) {
    let treatments: HashMap<TreatmentId, String> = store
        .list::<Treatment>()
        .unwrap()
        .into_iter()
        .map(|t| (t.id, t.code))
        .collect();
    let assigned: HashMap<EnclosureId, String> = store
        .list::<Assignment>()
        .unwrap()
        .into_iter()
        .map(|a| (a.enclosure_id, treatments[&a.treatment_id].clone()))
        .collect();
    let cages = store.list::<Enclosure>().unwrap();
    let start = DateTime::parse_from_rfc3339("2026-05-11T09:00:00+02:00").unwrap();
    let mut seen: HashMap<String, usize> = HashMap::new();
    store
        .write(|w| {
            for (i, cage) in cages.iter().enumerate() {
                let code = &assigned[&cage.id];
                let k = seen.entry(code.clone()).or_default();
                let v = record::start_visit(
                    w,
                    NewVisit {
                        enclosure_id: cage.id,
                        kind,
                        day: Some(day),
                        visited_at: start + Duration::days(day) + Duration::minutes(i as i64),
                        observer: Some("tester".into()),
                        device: None,
                    },
                )?;
                f(w, v.id, cage.id, code, *k)?;
                *k += 1;
            }
            Ok(())
        })
        .unwrap();
}

fn taxa(store: &Store) -> HashMap<String, TaxonId> {
    store
        .list::<Taxon>()
        .unwrap()
        .into_iter()
        .map(|t| (t.code, t.id))
        .collect()
}

#[test]
fn class_and_pin_cover_convert_by_the_protocol() {
    // Daubenmire classes (Daubenmire 1959): 3, 2, 1 → 37.5 + 15 + 2.5 = 55 %
    // (docs/methods.md §1, computed), through the store and the analysis.
    let tmp = Temp::new();
    let mut store = store_with(
        &tmp,
        &[(
            r#"method = "percent""#,
            "method = \"class\"\nscale = \"daubenmire\"",
        )],
        1,
    );
    let t = taxa(&store);
    record_everywhere(&mut store, VisitKind::Cover, 0, |w, v, _, _, _| {
        for (code, class) in [("GRA1", "3"), ("CLO1", "2"), ("FOR1", "1")] {
            record::cover(
                w,
                v,
                CoverTarget::Taxon(t[code]),
                CoverEntry::Class(class.into()),
            )?;
        }
        Ok(())
    });
    let r = analysis::analyse(&store, &Options::default()).unwrap();
    assert_eq!(r.diversity.len(), 24);
    assert!(r.diversity.iter().all(|d| d.index.total_cover_pct == 55.0));
    let grass: Vec<f64> = r
        .species_cover
        .iter()
        .filter(|s| s.taxon == "GRA1")
        .map(|s| s.cover_pct)
        .collect();
    assert_eq!(grass, vec![37.5; 24]);
    // Relative cover (common practice): 100 × 37.5 / 55.
    let rel = r.species_cover.iter().find(|s| s.taxon == "GRA1").unwrap();
    assert!((rel.relative_cover_pct.unwrap() - 100.0 * 37.5 / 55.0).abs() < 1e-12);
    // Plant groups: grass 37.5, legume 15, forb 2.5.
    let groups: Vec<(PlantGroup, f64)> = r
        .group_cover
        .iter()
        .filter(|g| g.cage.enclosure == "C-01")
        .map(|g| (g.plant_group, g.cover_pct))
        .collect();
    assert_eq!(
        groups,
        vec![
            (PlantGroup::Grass, 37.5),
            (PlantGroup::Forb, 2.5),
            (PlantGroup::Legume, 15.0)
        ]
    );

    // Pin frame, first hits (Elzinga, Salzer & Willoughby 1998): 4 of 10 pins → 40 %.
    let tmp = Temp::new();
    let mut store = store_with(
        &tmp,
        &[(
            r#"method = "percent""#,
            "method = \"pins\"\npins_per_frame = 10\nhit_rule = \"first\"",
        )],
        1,
    );
    let t = taxa(&store);
    record_everywhere(&mut store, VisitKind::Cover, 0, |w, v, _, _, _| {
        record::cover(w, v, CoverTarget::Taxon(t["GRA1"]), CoverEntry::Pins(4))?;
        record::cover(w, v, CoverTarget::Taxon(t["FOR1"]), CoverEntry::Pins(3))?;
        record::cover(
            w,
            v,
            CoverTarget::Category("litter".into()),
            CoverEntry::Pins(3),
        )?;
        Ok(())
    });
    let r = analysis::analyse(&store, &Options::default()).unwrap();
    let c01: Vec<f64> = r
        .species_cover
        .iter()
        .filter(|s| s.cage.enclosure == "C-01")
        .map(|s| s.cover_pct)
        .collect();
    assert_eq!(c01, vec![30.0, 40.0]); // FOR1, GRA1 (by taxon code); litter is ground
}

#[test]
fn one_species_has_no_evenness_in_the_exported_table() {
    // docs/methods.md §4 (computed): one species → J′ NA; the CSV cell is empty,
    // never 0 or NaN.
    let tmp = Temp::new();
    let mut store = store_with(&tmp, &[], 1);
    let t = taxa(&store);
    record_everywhere(&mut store, VisitKind::Cover, 0, |w, v, _, _, _| {
        record::cover(
            w,
            v,
            CoverTarget::Taxon(t["GRA1"]),
            CoverEntry::Percent(40.0),
        )?;
        record::cover(
            w,
            v,
            CoverTarget::Taxon(t["FOR1"]),
            CoverEntry::Percent(0.0),
        )?;
        Ok(())
    });
    let out = tmp.path("x");
    fieldcage_core::export::export(&store, &out).unwrap();
    let text = std::fs::read_to_string(out.join("diversity.csv")).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let at = |name: &str| header.iter().position(|h| *h == name).unwrap();
    for line in lines {
        let cells: Vec<&str> = line.split(',').collect();
        assert_eq!(cells[at("richness")], "1");
        assert_eq!(cells[at("shannon")], "0");
        assert_eq!(cells[at("pielou")], "", "{line}");
        assert_eq!(cells[at("simpson")], "1");
        assert!(!line.contains("NaN"));
    }
}

#[test]
fn a_zero_mean_makes_the_ratio_undefined_and_the_row_says_so() {
    let tmp = Temp::new();
    let mut store = store_with(&tmp, &[], 1);
    let t = taxa(&store);
    let mut leaves: HashMap<EnclosureId, LeafId> = HashMap::new();
    store
        .write(|w| {
            for cage in w_cages(w)? {
                let leaf = record::tag_leaf(
                    w,
                    cage,
                    t["FOR1"],
                    &format!("L-{}", leaves.len()),
                    chrono::NaiveDate::from_ymd_opt(2026, 5, 11).unwrap(),
                    None,
                )?;
                leaves.insert(cage, leaf.id);
            }
            Ok(())
        })
        .unwrap();
    // Plants-only cages show no damage at all; slug cages some.
    record_everywhere(&mut store, VisitKind::Damage, 7, |w, v, cage, code, k| {
        let class = if code == "P" {
            "0"
        } else {
            ["1", "2", "3"][k % 3]
        };
        record::damage(w, v, leaves[&cage], DamageEntry::Class(class.into()))?;
        Ok(())
    });
    let r = analysis::analyse(&store, &Options::default()).unwrap();
    let e = r
        .effect
        .iter()
        .find(|e| e.response == "damage.index" && e.contrast == Contrast::HerbivoresVsPlantsOnly)
        .unwrap();
    assert_eq!(e.mean_control, 0.0);
    assert_eq!(e.lrr, None);
    assert_eq!(
        e.note.as_deref(),
        Some("mean of P is 0: the log response ratio is undefined")
    );
    // The other contrasts are defined: S, SB and SR all have damage.
    assert!(
        r.effect
            .iter()
            .filter(
                |e| e.response == "damage.index" && e.contrast != Contrast::HerbivoresVsPlantsOnly
            )
            .all(|e| e.lrr.is_some())
    );
}

fn w_cages(w: &fieldcage_core::store::Writer<'_>) -> fieldcage_core::Result<Vec<EnclosureId>> {
    // Inside the write transaction: read through the writer.
    Ok(
        fieldcage_core::store::list::<fieldcage_core::model::Enclosure>(w)?
            .into_iter()
            .map(|e| e.id)
            .collect(),
    )
}

#[test]
fn an_empty_season_exports_empty_analysis_tables() {
    // Only the setup: no visit yet. Every analysis table is written with its
    // header and no rows, and the report says there is nothing yet.
    let tmp = Temp::new();
    let store = store_with(&tmp, &[], 1);
    let out = tmp.path("x");
    let summary = fieldcage_core::export::export(&store, &out).unwrap();
    assert_eq!(summary.analysis.len(), tables::analysis().len());
    assert!(summary.analysis.iter().all(|(_, n)| *n == 0), "{summary:?}");
    let report = std::fs::read_to_string(out.join("report.md")).unwrap();
    assert!(
        report.contains("No stocked animals were followed."),
        "{report}"
    );
}

fn fieldcage_cli(args: &[&str], cwd: &Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_fieldcage"))
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("run fieldcage")
}

#[test]
fn results_command_prints_the_effect_table() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    assert!(
        fieldcage_cli(&["demo", "--db", "d.db"], cwd)
            .status
            .success()
    );
    let out = fieldcage_cli(&["results", "--db", "d.db"], cwd);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("damage.index") && text.contains("lethal_vs_no_predator"),
        "{text}"
    );
    assert!(
        text.contains("Predator effect split") && text.contains("Assumptions:"),
        "{text}"
    );
    // The same assumption texts as report.md and the results screen.
    let store = fieldcage_core::Store::open(cwd.join("d.db")).unwrap();
    let r =
        fieldcage_core::analysis::analyse(&store, &fieldcage_core::analysis::Options::default())
            .unwrap();
    let a = fieldcage_core::analysis::report::assumptions(&r);
    for part in [&a.summaries, &a.effects, &a.split] {
        assert!(text.contains(part.as_str()), "{part}");
    }

    let out = fieldcage_cli(
        &[
            "results",
            "--db",
            "d.db",
            "--response",
            "damage.index",
            "--day",
            "14",
            "--json",
        ],
        cwd,
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let effects = json["effects"].as_array().unwrap();
    // Three contrasts, one row each (one treatment per role in the demo).
    assert_eq!(effects.len(), 3);
    assert!(
        effects
            .iter()
            .all(|e| e["response"] == "damage.index" && e["day"] == 14)
    );
    assert_eq!(json["splits"].as_array().unwrap().len(), 1);
    assert_eq!(json["options"]["missing_as"], "dead");

    // Bad input names the field and the value.
    let out = fieldcage_cli(
        &["results", "--db", "d.db", "--response", "cover.totl"],
        cwd,
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("results.response")
            && err.contains("cover.totl")
            && err.contains("cover.total"),
        "{err}"
    );
    let out = fieldcage_cli(
        &[
            "results",
            "--db",
            "d.db",
            "--response",
            "damage.index",
            "--day",
            "99",
        ],
        cwd,
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("results.day") && err.contains("\"99\"") && err.contains("7, 14, 21, 28"),
        "{err}"
    );
}

#[test]
fn analysis_probe_answers_json() {
    // The probe is the test kit's (`fieldcage-probe` for the Python
    // reference tests); the user's binary has no such command (tests/cli.rs).
    let answer =
        fieldcage_testkit::probe::run(r#"{"op": "summary", "samples": [[2, 4, 4, 5, 10], []]}"#)
            .unwrap();
    let json: serde_json::Value = serde_json::from_str(&answer).unwrap();
    // Worked by hand (common practice): 2, 4, 4, 5, 10 → mean 5, SD 3.
    assert_eq!(json["results"][0]["mean"], 5.0);
    assert_eq!(json["results"][0]["sd"], 3.0);
    assert!(json["results"][1].is_null());
}

#[test]
fn chart_data_covers_every_chart_of_the_results_screen() {
    let tmp = Temp::new();
    let (_, r) = demo_results(&tmp);
    let charts = analysis::charts::charts(&r);
    // Cover over time: total and four plant groups, for each of 4 treatments,
    // each with the three cover days (0, 14, 28).
    assert_eq!(charts.cover_over_time.len(), 5 * 4);
    assert!(
        charts
            .cover_over_time
            .iter()
            .all(|s| s.points.iter().map(|p| p.day).eq([0, 14, 28]))
    );
    // Damage: index and mean percent, 4 treatments, weekly days 7–28.
    assert_eq!(charts.damage_by_treatment.len(), 2 * 4);
    // Survival: slugs in S, SB, SR and beetles in SB, SR; each curve starts at
    // 1 on the stocking day and never rises.
    assert_eq!(charts.survival_curves.len(), 5);
    for c in &charts.survival_curves {
        assert_eq!((c.points[0].day, c.points[0].survival), (0, 1.0));
        assert!(c.points.windows(2).all(|w| w[1].survival <= w[0].survival));
    }
    // Effect sizes: the report's headline responses (cover total and groups,
    // richness, Shannon, damage, survival), each on its last day with its
    // interval; no per-species response.
    assert!(!charts.effect_sizes.is_empty());
    assert!(
        charts
            .effect_sizes
            .iter()
            .all(|e| Some(e.day) == r.last_day(&e.response) && e.ci_low.is_some())
    );
    assert!(
        charts
            .effect_sizes
            .iter()
            .all(|e| !e.response.starts_with(analysis::response::COVER_TAXON))
    );
    for wanted in ["cover.total", "diversity.shannon", "damage.index"] {
        assert_eq!(
            charts
                .effect_sizes
                .iter()
                .filter(|e| e.response == wanted)
                .count(),
            3,
            "three contrasts of {wanted}"
        );
    }
    // The split of the same responses on the same days, as in the tables.
    let total = charts
        .predator_split
        .iter()
        .find(|p| p.response == "cover.total")
        .expect("a split of total cover");
    assert!(
        r.predator_split.contains(total),
        "the split row is the table's row"
    );
    assert_eq!(Some(total.day), r.last_day("cover.total"));
    // Plain serde data: it serialises to JSON for the UI.
    let json = serde_json::to_value(&charts).unwrap();
    assert!(json["survival_curves"][0]["points"].is_array());
}

#[test]
fn the_report_states_each_result_with_its_assumptions() {
    let tmp = Temp::new();
    let (store, _) = demo_results(&tmp);
    let out = tmp.path("x");
    fieldcage_core::export::export(&store, &out).unwrap();
    let report = std::fs::read_to_string(out.join("report.md")).unwrap();
    for section in [
        "## Survival of stocked animals",
        "## Cover, diversity and herbivory by treatment",
        "## Treatment effects (log response ratios)",
        "## Consumptive and non-consumptive predator effects",
        "## Data handling",
    ] {
        assert!(report.contains(section), "{section}");
    }
    // Each result section states its assumptions and names its sources.
    assert_eq!(report.matches("Assumptions").count(), 4);
    for source in [
        "Kaplan & Meier 1958",
        "Mayfield (1961, 1975)",
        "Pollock et al. 1989",
        "Simpson 1949",
        "Hill 1973",
        "Dirzo & Domínguez 1995",
        "Hedges, Gurevitch & Curtis 1999",
        "Preisser, Bolnick & Benard 2005",
        "Dembicz & Dengler 2025",
    ] {
        assert!(report.contains(source), "the report names {source}");
    }
    assert!(
        report.contains("count as deaths"),
        "the missing-animal rule"
    );
    // Every analysis table is listed.
    for t in tables::analysis() {
        assert!(report.contains(&format!("`{}.csv`", t.name)), "{}", t.name);
    }
}

#[test]
fn the_results_operation_serves_charts_with_their_assumptions() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let service = fieldcage_ops::Service::new(store);
    let view = service.call("results", serde_json::json!({})).unwrap();
    // The demo's four treatments (demo_data/definition.toml), in code order.
    let codes: Vec<&str> = view["treatments"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["code"].as_str().unwrap())
        .collect();
    assert_eq!(codes, ["P", "S", "SB", "SR"]);
    // Every part of the screen says what it assumes, naming its method's source.
    for (part, source) in [
        ("survival", "Kaplan & Meier 1958"),
        ("summaries", "Student's t"),
        ("effects", "Hedges, Gurevitch & Curtis 1999"),
        ("split", "non-consumptive / total"),
    ] {
        let text = view["assumptions"][part].as_str().unwrap();
        assert!(text.contains(source), "{part}: {text}");
    }
    // Each effect point lies inside its interval.
    for e in view["charts"]["effect_sizes"].as_array().unwrap() {
        let (lo, est, hi) = (
            e["ci_low"].as_f64().unwrap(),
            e["lrr"].as_f64().unwrap(),
            e["ci_high"].as_f64().unwrap(),
        );
        assert!(lo <= est && est <= hi, "{e}");
    }
    // Counting missing animals as censored can only raise survival: fewer
    // deaths for the same animals at risk (Kaplan & Meier 1958).
    let censored = service
        .call("results", serde_json::json!({ "missing_as": "censored" }))
        .unwrap();
    assert_eq!(censored["options"]["missing_as"], "censored");
    let last = |v: &serde_json::Value, treatment: &str| {
        let curve = v["charts"]["survival_curves"]
            .as_array()
            .unwrap()
            .iter()
            .find(|c| c["treatment"] == treatment && c["taxon"] == "SLUG")
            .unwrap()
            .clone();
        curve["points"].as_array().unwrap().last().unwrap()["survival"]
            .as_f64()
            .unwrap()
    };
    assert!(last(&censored, "SB") >= last(&view, "SB"));
    assert!(
        censored["assumptions"]["survival"]
            .as_str()
            .unwrap()
            .contains("censored")
    );
    // Bad input names the field and the value.
    let bad = service
        .call("results", serde_json::json!({ "missing_as": "maybe" }))
        .unwrap_err();
    assert_eq!(
        (bad.code, bad.field.as_deref()),
        (fieldcage_ops::ProblemCode::BadRequest, Some("missing_as"))
    );
    assert!(bad.message.contains("maybe"), "{}", bad.message);
}
