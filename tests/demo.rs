//! The demo season: reproducible, plausible for its invented scenario, and
//! shipped in demo_data/ without drift.

use crate::util::Raw;
use std::path::Path;

use fieldcage_core::model::*;

use crate::util::{Temp, data_snapshot, demo_store};

#[test]
fn the_demo_season_is_the_same_on_every_build() {
    let a = Temp::new();
    let b = Temp::new();
    // The device id and change-log clock differ per database; the data do not.
    let sa = data_snapshot(&demo_store(&a));
    let sb = data_snapshot(&demo_store(&b));
    assert!(sa.len() > 100_000);
    assert_eq!(sa, sb);
}

#[test]
fn the_demo_season_covers_every_cage_and_visit_kind() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let visits = store.list::<Visit>().unwrap();
    let enclosures = store.list::<Enclosure>().unwrap();
    assert_eq!(
        enclosures.len(),
        24,
        "6 blocks x 4 treatments (docs/methods.md §10.5)"
    );
    for kind in VisitKind::ALL {
        assert!(visits.iter().any(|v| v.kind == *kind), "{kind} visits");
    }
    for e in &enclosures {
        let n = visits.iter().filter(|v| v.enclosure_id == e.id).count();
        // 1 stocking + 10 census + 3 cover + 4 damage, give or take the planted problems.
        assert!((17..=19).contains(&n), "{} has {n} visits", e.label);
    }
    assert_eq!(
        store.list::<TaggedLeaf>().unwrap().len(),
        72,
        "3 tagged leaves per cage"
    );
}

#[test]
fn the_demo_season_is_plausible_for_its_scenario() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let mean_damage = |treatment: &str| -> f64 {
        store
            .raw()
            .query_row(
                "SELECT avg(d.damage_pct) FROM damage_record d JOIN visit v ON v.id = d.visit_id \
                 JOIN assignment a ON a.enclosure_id = v.enclosure_id JOIN treatment t ON t.id = a.treatment_id \
                 WHERE t.code = ?1 AND v.day = 28",
                [treatment],
                |r| r.get(0),
            )
            .unwrap()
    };
    // Invented scenario: slugs alone damage most, a lethal beetle least, risk in between; plants-only little.
    let (p, s, sb, sr) = (
        mean_damage("P"),
        mean_damage("S"),
        mean_damage("SB"),
        mean_damage("SR"),
    );
    assert!(
        p < sb && sb < sr && sr < s,
        "P {p}, SB {sb}, SR {sr}, S {s}"
    );
}

#[test]
fn every_planted_problem_names_a_real_cage_and_day() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let problems = fieldcage_core::demo::planted_problems(&store).unwrap();
    assert_eq!(problems.len(), 8);
    let labels: Vec<String> = store
        .list::<Enclosure>()
        .unwrap()
        .into_iter()
        .map(|e| e.label)
        .collect();
    for p in &problems {
        assert!(labels.contains(&p.enclosure), "{p:?}");
    }
    let readme =
        std::fs::read_to_string(crate::util::repo_root().join("demo_data/README.md")).unwrap();
    for p in &problems {
        let line = format!("| {} | {} | {} |", p.enclosure, p.day, p.what);
        assert!(readme.contains(&line), "demo_data/README.md lists {line}");
    }
}

/// demo_data/season is exactly what the demo build exports: regenerate it as
/// DEVELOPERS.md says when this fails after an intended change.
#[test]
fn shipped_demo_tables_match_a_fresh_build() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let out = tmp.path("season");
    fieldcage_core::export::export(&store, &out).unwrap();
    let shipped = crate::util::repo_root().join("demo_data/season");
    let list = |dir: &Path| -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    };
    assert_eq!(list(&shipped), list(&out));
    for name in list(&out) {
        let fresh = std::fs::read(out.join(&name)).unwrap();
        let old = std::fs::read(shipped.join(&name)).unwrap();
        assert!(
            fresh == old,
            "demo_data/season/{name} differs from a fresh build"
        );
    }
}

/// Issue 15: the demo opened on a field day stands as it stood that
/// mid-morning: cages still due, nothing dated after it, and so no "in the
/// future" flag (the decision: the demo stops at its today).
#[test]
fn regression_15_the_demo_on_its_today_has_cages_still_due_and_nothing_later() {
    let tmp = Temp::new();
    let day21 = chrono::NaiveDate::from_ymd_opt(2026, 6, 1).unwrap();
    let store = fieldcage_core::demo::open_or_build(&tmp.path("as-of.db"), Some(day21)).unwrap();
    let (h, m) = fieldcage_core::demo::AS_OF_TIME;
    let cutoff = day21.and_hms_opt(h, m, 0).unwrap();
    let visits = store.list::<Visit>().unwrap();
    assert!(visits.iter().all(|v| v.visited_at.naive_local() <= cutoff));
    assert!(
        visits.iter().any(|v| v.visited_at.date_naive() == day21),
        "part of the day is done"
    );
    let flags = store.list::<StoredFlag>().unwrap();
    assert!(
        flags.iter().all(|f| f.rule_id != "visits.future"),
        "nothing in the future on its today"
    );
    // The route of that day: some cages done, some still to do.
    let service = fieldcage_ops::Service::new(store).with_today(day21);
    let route = service.route(Default::default()).unwrap();
    let states: Vec<_> = route
        .blocks
        .iter()
        .flat_map(|b| &b.cages)
        .map(|c| c.state)
        .collect();
    use fieldcage_ops::CageState;
    assert!(states.contains(&CageState::Done), "{states:?}");
    assert!(states.contains(&CageState::NotStarted), "{states:?}");
    // The whole season is still what `fieldcage demo` builds.
    let full = fieldcage_core::demo::open_or_build(&tmp.path("full.db"), None).unwrap();
    assert!(full.list::<Visit>().unwrap().len() > visits.len());
}
