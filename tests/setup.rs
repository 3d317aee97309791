//! The experiment definition file and `init`.

use fieldcage_core::model::*;
use fieldcage_core::setup;

use crate::util::{Temp, demo_definition_with, store_with};

#[test]
fn init_creates_the_demo_experiment_and_records_the_seed() {
    let tmp = Temp::new();
    let store = store_with(&tmp, &[], 42);
    let e = &store.list::<Experiment>().unwrap()[0];
    assert_eq!(e.randomisation_seed, Some(42));
    assert_eq!(store.list::<Enclosure>().unwrap().len(), 24);
    assert_eq!(store.list::<Treatment>().unwrap().len(), 4);
    let assignments = store.list::<Assignment>().unwrap();
    assert_eq!(assignments.len(), 24);
    assert!(
        assignments
            .iter()
            .all(|a| a.seed == Some(42) && a.method == AssignmentMethod::Rcbd)
    );
    // Census every 3 days from 3 to 30 (10), stocking 1, cover 3, damage 4 (demo_data/definition.toml).
    assert_eq!(store.list::<ScheduleEntry>().unwrap().len(), 18);
}

#[test]
fn the_layout_holds_each_treatment_once_per_block_and_repeats_with_its_seed() {
    let a = Temp::new();
    let b = Temp::new();
    let c = Temp::new();
    let layout_a = setup::layout(&store_with(&a, &[], 9)).unwrap();
    let layout_b = setup::layout(&store_with(&b, &[], 9)).unwrap();
    let layout_c = setup::layout(&store_with(&c, &[], 10)).unwrap();
    assert_eq!(layout_a, layout_b, "same seed, same layout");
    assert_ne!(layout_a, layout_c, "another seed, another layout");
    for block in ["B1", "B2", "B3", "B4", "B5", "B6"] {
        let mut codes: Vec<&str> = layout_a
            .iter()
            .filter(|c| c.block == block)
            .map(|c| c.treatment.as_str())
            .collect();
        codes.sort_unstable();
        assert_eq!(codes, ["P", "S", "SB", "SR"], "block {block}");
    }
    let text = setup::format_layout(&layout_a);
    assert!(
        text.contains("B1") && text.contains("C-01:") && text.contains("Plants only"),
        "{text}"
    );
}

#[test]
fn a_block_that_cannot_hold_each_treatment_once_is_a_clear_error() {
    let def = demo_definition_with(&[(
        r#"["C-01", "C-02", "C-03", "C-04"]"#,
        r#"["C-01", "C-02", "C-03"]"#,
    )])
    .unwrap();
    let tmp = Temp::new();
    let mut store = tmp.store("a.db");
    let err = setup::init(&mut store, &def, 1).unwrap_err().to_string();
    assert!(
        err.contains("block[B1].enclosures")
            && err.contains("3 enclosures")
            && err.contains("4 treatments"),
        "{err}"
    );
    assert_eq!(
        crate::util::count(&store, "experiment"),
        0,
        "nothing written"
    );
}

#[test]
fn init_twice_is_refused() {
    let tmp = Temp::new();
    let mut store = store_with(&tmp, &[], 1);
    let def = demo_definition_with(&[]).unwrap();
    let before = crate::util::snapshot(&store);
    let err = setup::init(&mut store, &def, 2).unwrap_err().to_string();
    assert!(err.contains("already holds an experiment"), "{err}");
    assert_eq!(crate::util::snapshot(&store), before);
}

/// Each broken definition is refused with a message naming the entry.
#[test]
fn definition_errors_name_the_entry_and_value() {
    let cases: &[(&str, &str, &str)] = &[
        (
            r#"taxon = "SLUG", count = 10"#,
            r#"taxon = "SNAIL", count = 10"#,
            "treatment[S].stock[0].taxon: unknown taxon code \"SNAIL\"",
        ),
        (
            r#"start_date = 2026-05-11"#,
            r#"start_date = "soon""#,
            "line",
        ),
        (
            r#"end_date = 2026-06-10"#,
            r#"end_date = 2026-05-01"#,
            "experiment.end_date: 2026-05-01 is before start_date 2026-05-11",
        ),
        (
            r#"scale = "dirzo-dominguez""#,
            r#"scale = "daubenmire""#,
            "damage.scale: scale \"daubenmire\" is a cover scale, not damage",
        ),
        (
            r#"plant_group = "sedge""#,
            "",
            "taxon[SED1].plant_group: a plant needs a plant_group",
        ),
        (
            r#"code = "SR""#,
            r#"code = "S""#,
            "treatment[S]: the code \"S\" is used twice",
        ),
        (
            "census = { every = 3, from = 3, to = 30 }",
            "census = [3, 6, 6]",
            "schedule.census: day 6 is listed twice",
        ),
        (
            "herbivores = false",
            "herbivores = false\ncolour = \"red\"",
            "unknown field `colour`",
        ),
        (
            r#"predator_mode = "lethal""#,
            r#"predator_mode = "deadly""#,
            "deadly",
        ),
    ];
    for (from, to, expected) in cases {
        let err = demo_definition_with(&[(from, to)]).unwrap_err().to_string();
        assert!(
            err.contains(expected),
            "replacing {from:?}: expected {expected:?} in {err:?}"
        );
        assert!(err.starts_with("test.toml:"), "names the file: {err}");
    }
}

#[test]
fn builtin_scales_carry_the_published_midpoints() {
    let scales = setup::definition::builtin_scales();
    let mid = |scale: &str| -> Vec<(String, f64)> {
        scales
            .iter()
            .find(|s| s.code == scale)
            .unwrap()
            .classes
            .iter()
            .map(|c| (c.code.clone(), c.midpoint))
            .collect()
    };
    let pairs = |v: &[(&str, f64)]| {
        v.iter()
            .map(|(c, m)| (c.to_string(), *m))
            .collect::<Vec<_>>()
    };
    // Daubenmire 1959, Northwest Science 33:43-64.
    assert_eq!(
        mid("daubenmire"),
        pairs(&[
            ("1", 2.5),
            ("2", 15.0),
            ("3", 37.5),
            ("4", 62.5),
            ("5", 85.0),
            ("6", 97.5)
        ])
    );
    // Interagency Technical Reference 1734-4 (1996, rev. 1999): 0, T and 1-6.
    assert_eq!(
        mid("daubenmire-mod"),
        pairs(&[
            ("0", 0.0),
            ("T", 0.5),
            ("1", 3.0),
            ("2", 15.0),
            ("3", 37.5),
            ("4", 62.5),
            ("5", 85.0),
            ("6", 97.5)
        ])
    );
    // Braun-Blanquet classes; midpoints from memory (docs/methods.md section 1).
    assert_eq!(
        mid("braun-blanquet"),
        pairs(&[
            ("r", 0.1),
            ("+", 0.5),
            ("1", 2.5),
            ("2", 15.0),
            ("3", 37.5),
            ("4", 62.5),
            ("5", 87.5)
        ])
    );
    // Dirzo & Dominguez 1995 damage classes with midpoints (0, 3.5, 9, 18.5, 37.5, 75), from memory.
    assert_eq!(
        mid("dirzo-dominguez"),
        pairs(&[
            ("0", 0.0),
            ("1", 3.5),
            ("2", 9.0),
            ("3", 18.5),
            ("4", 37.5),
            ("5", 75.0)
        ])
    );
}

#[test]
fn a_user_scale_is_stored_as_data() {
    let tmp = Temp::new();
    let custom = r#"[cover]
code = "visual-1layer""#;
    let with_scale = r#"[[scale]]
code = "site-five"
name = "Site five-class scale"
kind = "cover"
classes = [
  { code = "a", lower = 0, upper = 10, midpoint = 5 },
  { code = "b", lower = 10, upper = 100, midpoint = 55 },
]

[cover]
code = "visual-1layer""#;
    let store = store_with(
        &tmp,
        &[
            (custom, with_scale),
            (
                r#"method = "percent""#,
                "method = \"class\"\nscale = \"site-five\"",
            ),
        ],
        3,
    );
    let scale = store
        .list::<Scale>()
        .unwrap()
        .into_iter()
        .find(|s| s.code == "site-five")
        .unwrap();
    let classes: Vec<ScaleClass> = store
        .list::<ScaleClass>()
        .unwrap()
        .into_iter()
        .filter(|c| c.scale_id == scale.id)
        .collect();
    assert_eq!(
        classes
            .iter()
            .map(|c| (c.code.as_str(), c.midpoint_pct))
            .collect::<Vec<_>>(),
        [("a", 5.0), ("b", 55.0)]
    );
    let protocol = &store.list::<CoverProtocol>().unwrap()[0];
    assert_eq!(protocol.scale_id, Some(scale.id));
}

/// A seed given on the command line that differs from the definition's own
/// is refused, naming both: the two would be two layouts.
#[test]
fn a_seed_given_against_the_definitions_seed_is_refused() {
    let text =
        fieldcage_core::demo::DEFINITION.replace("\n[experiment]\n", "\n[experiment]\nseed = 9\n");
    let def =
        fieldcage_core::setup::definition::parse(std::path::Path::new("d.toml"), &text).unwrap();
    let err = fieldcage_core::setup::choose_seed(&def, Some(10))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("seed") && err.contains("10") && err.contains("seed = 9"),
        "{err}"
    );
    assert_eq!(
        fieldcage_core::setup::choose_seed(&def, Some(9)).unwrap(),
        (9, fieldcage_core::setup::SeedSource::Given)
    );
}
