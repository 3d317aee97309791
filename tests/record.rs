//! Field-entry commands: derived percents and refusals.

use crate::util::Raw;
use chrono::DateTime;
use fieldcage_core::Store;
use fieldcage_core::model::*;
use fieldcage_core::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};

use crate::util::{Temp, snapshot, store_with};

fn open_visit(store: &mut Store, kind: VisitKind) -> VisitId {
    let enclosure = store.list::<Enclosure>().unwrap()[0].id;
    store
        .write(|w| {
            record::start_visit(
                w,
                NewVisit {
                    enclosure_id: enclosure,
                    kind,
                    day: Some(14),
                    visited_at: DateTime::parse_from_rfc3339("2026-05-25T09:00:00+02:00").unwrap(),
                    observer: Some("tester".into()),
                    device: None,
                },
            )
        })
        .unwrap()
        .id
}

fn taxon(store: &Store, code: &str) -> TaxonId {
    store
        .list::<Taxon>()
        .unwrap()
        .into_iter()
        .find(|t| t.code == code)
        .unwrap()
        .id
}

#[test]
fn daubenmire_classes_convert_to_midpoints() {
    let tmp = Temp::new();
    let mut store = store_with(
        &tmp,
        &[(
            r#"method = "percent""#,
            "method = \"class\"\nscale = \"daubenmire\"",
        )],
        1,
    );
    let visit = open_visit(&mut store, VisitKind::Cover);
    let taxa = [
        taxon(&store, "GRA1"),
        taxon(&store, "CLO1"),
        taxon(&store, "FOR1"),
    ];
    let total: f64 = store
        .write(|w| {
            let mut total = 0.0;
            for (t, class) in taxa.iter().zip(["3", "2", "1"]) {
                let row = record::cover(
                    w,
                    visit,
                    CoverTarget::Taxon(*t),
                    CoverEntry::Class(class.into()),
                )?;
                assert_eq!(
                    row.class_code.as_deref(),
                    Some(class),
                    "the raw class is kept"
                );
                total += row.cover_pct.unwrap();
            }
            Ok(total)
        })
        .unwrap();
    // Daubenmire 1959 midpoints: classes 3, 2, 1 -> 37.5 + 15 + 2.5 = 55 (docs/methods.md section 1, computed).
    assert_eq!(total, 55.0);
}

#[test]
fn a_class_code_not_on_the_scale_is_refused_with_the_scale_listed() {
    let tmp = Temp::new();
    let mut store = store_with(
        &tmp,
        &[(
            r#"method = "percent""#,
            "method = \"class\"\nscale = \"daubenmire\"",
        )],
        1,
    );
    let visit = open_visit(&mut store, VisitKind::Cover);
    let t = taxon(&store, "GRA1");
    let before = snapshot(&store);
    let err = store
        .write(|w| {
            record::cover(
                w,
                visit,
                CoverTarget::Taxon(t),
                CoverEntry::Class("7".into()),
            )
        })
        .unwrap_err()
        .to_string();
    assert_eq!(
        err,
        "cover_record.class_code: is not a class of the scale (1, 2, 3, 4, 5, 6) (value: \"7\")"
    );
    assert_eq!(snapshot(&store), before);
}

#[test]
fn pin_hits_convert_to_percent_of_the_frame() {
    let tmp = Temp::new();
    let mut store = store_with(
        &tmp,
        &[(
            r#"method = "percent""#,
            "method = \"pins\"\npins_per_frame = 10\nhit_rule = \"first\"",
        )],
        1,
    );
    let visit = open_visit(&mut store, VisitKind::Cover);
    let grass = taxon(&store, "GRA1");
    let forb = taxon(&store, "FOR1");
    let covers = store
        .write(|w| {
            Ok(vec![
                record::cover(w, visit, CoverTarget::Taxon(grass), CoverEntry::Pins(4))?.cover_pct,
                record::cover(w, visit, CoverTarget::Taxon(forb), CoverEntry::Pins(3))?.cover_pct,
                record::cover(
                    w,
                    visit,
                    CoverTarget::Category("litter".into()),
                    CoverEntry::Pins(2),
                )?
                .cover_pct,
                record::cover(
                    w,
                    visit,
                    CoverTarget::Category("bare".into()),
                    CoverEntry::Pins(1),
                )?
                .cover_pct,
            ])
        })
        .unwrap();
    // Elzinga, Salzer & Willoughby 1998: cover = 100 x hits / pins; a 10-pin frame
    // with first hits 4, 3, 2, 1 gives 40/30/20/10 % (docs/methods.md section 2, computed).
    assert_eq!(covers, [Some(40.0), Some(30.0), Some(20.0), Some(10.0)]);
    let clover = taxon(&store, "CLO1");
    let err = store
        .write(|w| record::cover(w, visit, CoverTarget::Taxon(clover), CoverEntry::Pins(11)))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("pin_hits") && err.contains("11") && err.contains("10 pins"),
        "{err}"
    );
}

#[test]
fn entries_that_do_not_fit_the_visit_or_protocol_are_refused() {
    let tmp = Temp::new();
    let mut store = store_with(&tmp, &[], 1);
    let cover_visit = open_visit(&mut store, VisitKind::Cover);
    let slug = taxon(&store, "SLUG");
    let grass = taxon(&store, "GRA1");
    let before = snapshot(&store);
    let cases: Vec<(fieldcage_core::Result<()>, &str)> = vec![
        (
            store.write(|w| record::census(w, cover_visit, slug, Some(3), None, None).map(drop)),
            "is a cover visit; this entry belongs to a census visit",
        ),
        (
            store.write(|w| {
                record::cover(
                    w,
                    cover_visit,
                    CoverTarget::Taxon(slug),
                    CoverEntry::Percent(5.0),
                )
                .map(drop)
            }),
            "is a herbivore, not a plant",
        ),
        (
            store.write(|w| {
                record::cover(
                    w,
                    cover_visit,
                    CoverTarget::Taxon(grass),
                    CoverEntry::Class("3".into()),
                )
                .map(drop)
            }),
            "uses the percent method",
        ),
        (
            store.write(|w| {
                record::cover(
                    w,
                    cover_visit,
                    CoverTarget::Taxon(grass),
                    CoverEntry::Percent(120.0),
                )
                .map(drop)
            }),
            "cover_record.value_pct: is above the maximum 100 (value: \"120\")",
        ),
        (
            store.write(|w| {
                record::cover(
                    w,
                    cover_visit,
                    CoverTarget::Category("gravel".into()),
                    CoverEntry::Percent(5.0),
                )
                .map(drop)
            }),
            "is not a ground category",
        ),
        (
            store.write(|w| {
                record::cover(
                    w,
                    cover_visit,
                    CoverTarget::Category("vegetation".into()),
                    CoverEntry::Percent(5.0),
                )
                .map(drop)
            }),
            "only with a layered protocol",
        ),
    ];
    for (result, expected) in cases {
        let err = result.unwrap_err().to_string();
        assert!(err.contains(expected), "expected {expected:?} in {err:?}");
    }
    assert_eq!(snapshot(&store), before, "no refused entry wrote anything");
}

#[test]
fn zero_and_not_assessed_are_kept_apart() {
    let tmp = Temp::new();
    let mut store = store_with(&tmp, &[], 1);
    let visit = open_visit(&mut store, VisitKind::Census);
    let slug = taxon(&store, "SLUG");
    let beetle = taxon(&store, "BEET");
    store
        .write(|w| {
            record::census(w, visit, slug, Some(0), Some(0), None)?;
            record::census(w, visit, beetle, None, None, None)?;
            Ok(())
        })
        .unwrap();
    let conn = store.raw();
    let rows: Vec<(Option<i64>, Option<i64>)> = conn
        .prepare("SELECT alive, missing FROM census ORDER BY taxon_id = ?1 DESC")
        .unwrap()
        .query_map([slug], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    // 0 = looked, absent; NULL = not assessed (docs/methods.md §10.4; common practice).
    assert_eq!(rows, [(Some(0), None), (None, None)]);
}

#[test]
fn damage_classes_convert_to_midpoints_and_percent_is_kept() {
    let tmp = Temp::new();
    let mut store = store_with(&tmp, &[], 1);
    let visit = open_visit(&mut store, VisitKind::Damage);
    let enclosure = store.list::<Enclosure>().unwrap()[0].id;
    let forb = taxon(&store, "FOR1");
    let (a, b) = store
        .write(|w| {
            let day = chrono::NaiveDate::from_ymd_opt(2026, 5, 11).unwrap();
            let l1 = record::tag_leaf(w, enclosure, forb, "X-T1", day, None)?;
            let l2 = record::tag_leaf(w, enclosure, forb, "X-T2", day, None)?;
            let a = record::damage(w, visit, l1.id, DamageEntry::Class("3".into()))?;
            let b = record::damage(w, visit, l2.id, DamageEntry::Class("5".into()))?;
            Ok((a, b))
        })
        .unwrap();
    // Dirzo & Dominguez 1995 class midpoints 18.5 and 75 (from memory; docs/methods.md section 3).
    assert_eq!((a.damage_pct, b.damage_pct), (Some(18.5), Some(75.0)));
    let err = store
        .write(|w| {
            let leaf = store_leaf(w);
            record::damage(w, visit, leaf, DamageEntry::Class("9".into()))
        })
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("damage_record.class_code") && err.contains("\"9\""),
        "{err}"
    );
}

fn store_leaf(w: &fieldcage_core::store::Writer<'_>) -> LeafId {
    // Inside the write transaction: read through the writer.
    fieldcage_core::store::first::<fieldcage_core::model::TaggedLeaf>(w)
        .unwrap()
        .expect("a tagged leaf")
        .id
}
