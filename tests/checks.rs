//! Day's-end checks: one test per rule (a record that trips it, a near miss at
//! the boundary that does not, and the numbers in the message), the demo
//! season's planted problems found exactly, and the stored flags: idempotent
//! re-runs, fixed and reopened flags, confirmations with notes, and flags
//! that survive export → import.
//!
//! Thresholds: the demo protocol's cover tolerance is 5 points (common
//! practice, docs/methods.md section 2); the other limits are
//! `checks::Limits::DEFAULT` (our own: 25 points of cover change, 15 % damage
//! without herbivores). Counts and schedules are the demo definition's
//! (invented): 10 slugs stocked, restock below 5, census every 3 days from day
//! 3 with 1 grace day.

use crate::util::Raw;
use chrono::{DateTime, Duration, FixedOffset, NaiveDate, TimeZone};
use fieldcage_core::checks::{self, Flag, Rule, Scope};
use fieldcage_core::model::*;
use fieldcage_core::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};
use fieldcage_core::store::Writer;
use fieldcage_core::{Store, demo, tables};
use rusqlite::types::Value;

use crate::util::{Temp, demo_store, store_with};

/// Day 0 of the demo definition.
fn start() -> NaiveDate {
    NaiveDate::from_ymd_opt(2026, 5, 11).unwrap()
}

/// Local time (+02:00, the demo's offset) on a day of the experiment.
fn at(day: i64, hour: u32, minute: u32) -> DateTime<FixedOffset> {
    let local = (start() + Duration::days(day))
        .and_hms_opt(hour, minute, 0)
        .unwrap();
    FixedOffset::east_opt(2 * 3600)
        .unwrap()
        .from_local_datetime(&local)
        .unwrap()
}

/// A store set up from the demo definition (no records), with helpers to
/// record into it and to see what one rule raises.
struct Fx {
    _tmp: Temp,
    store: Store,
}

impl Fx {
    fn new(replacements: &[(&str, &str)]) -> Fx {
        let tmp = Temp::new();
        let store = store_with(&tmp, replacements, 1);
        Fx { _tmp: tmp, store }
    }

    /// The n-th cage (by label) of a treatment: (id, label).
    fn cage(&self, treatment: &str, n: usize) -> (EnclosureId, String) {
        let mut labels: Vec<String> = fieldcage_core::setup::layout(&self.store)
            .unwrap()
            .into_iter()
            .filter(|c| c.treatment == treatment)
            .map(|c| c.enclosure)
            .collect();
        labels.sort();
        let label = labels[n].clone();
        let id = self
            .store
            .list::<Enclosure>()
            .unwrap()
            .into_iter()
            .find(|e| e.label == label)
            .unwrap()
            .id;
        (id, label)
    }

    fn taxon(&self, code: &str) -> TaxonId {
        self.store
            .list::<Taxon>()
            .unwrap()
            .into_iter()
            .find(|t| t.code == code)
            .unwrap()
            .id
    }

    /// A visit on a planned day at 09:00 by "tester".
    fn visit(&mut self, cage: EnclosureId, kind: VisitKind, day: i64) -> VisitId {
        self.visit_at(cage, kind, Some(day), at(day, 9, 0), Some("tester"))
    }

    fn visit_at(
        &mut self,
        cage: EnclosureId,
        kind: VisitKind,
        day: Option<i64>,
        when: DateTime<FixedOffset>,
        observer: Option<&str>,
    ) -> VisitId {
        self.write(|w| {
            record::start_visit(
                w,
                NewVisit {
                    enclosure_id: cage,
                    kind,
                    day,
                    visited_at: when,
                    observer: observer.map(str::to_owned),
                    device: None,
                },
            )
        })
        .id
    }

    fn write<T>(&mut self, f: impl FnOnce(&mut Writer<'_>) -> fieldcage_core::Result<T>) -> T {
        self.store.write(f).unwrap()
    }

    /// Cover rows of one survey, entered in the field.
    fn cover(&mut self, visit: VisitId, rows: &[(&str, CoverEntry)]) {
        let targets: Vec<(CoverTarget, CoverEntry)> = rows
            .iter()
            .map(|(code, entry)| {
                let target = match self
                    .store
                    .list::<Taxon>()
                    .unwrap()
                    .iter()
                    .find(|t| t.code == *code)
                {
                    Some(t) => CoverTarget::Taxon(t.id),
                    None => CoverTarget::Category((*code).to_owned()),
                };
                (target, entry.clone())
            })
            .collect();
        self.write(|w| {
            for (target, entry) in targets {
                record::cover(w, visit, target, entry)?;
            }
            Ok(())
        });
    }

    /// A cover row written as an import could store it (schema-valid, but
    /// not made by the field-entry command).
    fn raw_cover(&mut self, visit: VisitId, taxon: &str, row: impl FnOnce(&mut CoverRecord)) {
        let taxon = self.taxon(taxon);
        self.write(|w| {
            let mut r = CoverRecord {
                id: CoverRecordId(w.new_id()),
                visit_id: visit,
                taxon_id: Some(taxon),
                category: None,
                value_pct: None,
                class_code: None,
                pin_hits: None,
                cover_pct: None,
                notes: None,
            };
            row(&mut r);
            w.insert(&r)
        });
    }

    fn census(&mut self, visit: VisitId, taxon: &str, alive: Option<i64>, dead: Option<i64>) {
        let taxon = self.taxon(taxon);
        self.write(|w| record::census(w, visit, taxon, alive, dead, Some(0)));
    }

    fn stock(&mut self, visit: VisitId, taxon: &str, kind: StockingKind, count: i64) {
        let taxon = self.taxon(taxon);
        self.write(|w| record::stock(w, visit, taxon, kind, count, None));
    }

    fn leaf(&mut self, cage: EnclosureId, label: &str, tagged_on: i64) -> LeafId {
        let taxon = self.taxon("FOR1");
        self.write(|w| {
            record::tag_leaf(
                w,
                cage,
                taxon,
                label,
                start() + Duration::days(tagged_on),
                None,
            )
        })
        .id
    }

    fn damage(&mut self, visit: VisitId, leaf: LeafId, entry: DamageEntry) {
        self.write(|w| record::damage(w, visit, leaf, entry));
    }

    /// The flags of one rule over the whole season, as of the end of day 40.
    fn flags(&self, rule: &Rule) -> Vec<Flag> {
        self.flags_on(rule, 40)
    }

    fn flags_on(&self, rule: &Rule, today: i64) -> Vec<Flag> {
        checks::check(&self.store, &Scope::Season, start() + Duration::days(today))
            .unwrap()
            .into_iter()
            .filter(|f| f.rule_id == rule.id)
            .collect()
    }
}

/// The flags raised in one cage.
fn in_cage<'a>(flags: &'a [Flag], cage: &str) -> Vec<&'a Flag> {
    flags.iter().filter(|f| f.cage == cage).collect()
}

/// The one flag raised in a cage.
fn one<'a>(flags: &'a [Flag], cage: &str) -> &'a Flag {
    let found = in_cage(flags, cage);
    assert_eq!(found.len(), 1, "one flag in {cage}: {flags:#?}");
    found[0]
}

fn none(flags: &[Flag], cage: &str) {
    assert!(
        in_cage(flags, cage).is_empty(),
        "no flag in {cage}: {flags:#?}"
    );
}

fn says(flag: &Flag, parts: &[&str]) {
    for p in parts {
        assert!(
            flag.message.contains(p),
            "{} message names {p:?}: {}",
            flag.rule_id,
            flag.message
        );
    }
}

const CLASS_COVER: (&str, &str) = (
    r#"method = "percent""#,
    "method = \"class\"\nscale = \"daubenmire\"",
);

// ---- cover ----------------------------------------------------------------

#[test]
fn cover_method_flags_an_entry_the_protocol_does_not_use() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.raw_cover(va, "GRA1", |r| {
        r.class_code = Some("3".into());
        r.cover_pct = Some(37.5);
    });
    let vb = fx.visit(b, VisitKind::Cover, 14);
    fx.raw_cover(vb, "GRA1", |r| {
        r.value_pct = Some(10.0);
        r.cover_pct = Some(12.0);
    });
    let vc = fx.visit(c, VisitKind::Cover, 14);
    fx.cover(vc, &[("GRA1", CoverEntry::Percent(10.0))]);
    let flags = fx.flags(&checks::cover::METHOD);
    says(one(&flags, &la), &["class code \"3\"", "records percent"]);
    says(one(&flags, &lb), &["cover_pct 12 %", "10 %"]);
    none(&flags, &lc);
}

#[test]
fn cover_not_on_scale_lists_the_scale() {
    let mut fx = Fx::new(&[CLASS_COVER]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.raw_cover(va, "GRA1", |r| r.class_code = Some("7".into()));
    let vb = fx.visit(b, VisitKind::Cover, 14);
    // Daubenmire 1959: classes 1-6; 6 is the top class.
    fx.cover(vb, &[("GRA1", CoverEntry::Class("6".into()))]);
    let flags = fx.flags(&checks::cover::NOT_ON_SCALE);
    says(one(&flags, &la), &["\"7\"", "1, 2, 3, 4, 5, 6"]);
    none(&flags, &lb);
}

#[test]
fn cover_pins_above_frame() {
    let mut fx = Fx::new(&[(
        r#"method = "percent""#,
        "method = \"pins\"\npins_per_frame = 10\nhit_rule = \"any\"",
    )]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.raw_cover(va, "GRA1", |r| r.pin_hits = Some(11));
    let vb = fx.visit(b, VisitKind::Cover, 14);
    fx.cover(vb, &[("GRA1", CoverEntry::Pins(10))]);
    let flags = fx.flags(&checks::cover::PINS_ABOVE_FRAME);
    says(one(&flags, &la), &["11 pin hits", "10 pins"]);
    none(&flags, &lb);
}

#[test]
fn cover_total_of_a_visual_layer_is_100_within_the_tolerance() {
    let mut fx = Fx::new(&[]);
    let p = CoverEntry::Percent;
    let cases: [(&[(&str, CoverEntry)], bool); 4] = [
        (
            &[("GRA1", p(60.0)), ("FOR1", p(40.5)), ("litter", p(5.0))],
            true,
        ), // 105.5
        (
            &[("GRA1", p(60.0)), ("FOR1", p(40.0)), ("litter", p(5.0))],
            false,
        ), // 105
        (&[("GRA1", p(60.0)), ("litter", p(34.5))], true), // 94.5
        (&[("GRA1", p(60.0)), ("litter", p(35.0))], false), // 95
    ];
    let mut labels = Vec::new();
    for (i, (rows, _)) in cases.iter().enumerate() {
        let (cage, label) = fx.cage("S", i);
        let v = fx.visit(cage, VisitKind::Cover, 14);
        fx.cover(v, rows);
        labels.push(label);
    }
    let flags = fx.flags(&checks::cover::TOTAL);
    says(
        one(&flags, &labels[0]),
        &["105.5 %", "species 100.5", "ground 5", "100 ± 5"],
    );
    none(&flags, &labels[1]);
    says(one(&flags, &labels[2]), &["94.5 %", "100 ± 5"]);
    none(&flags, &labels[3]);
    assert_eq!(cases.iter().filter(|c| c.1).count(), flags.len());
}

#[test]
fn cover_total_of_first_hits_is_the_frame_exactly() {
    let mut fx = Fx::new(&[(
        r#"method = "percent""#,
        "method = \"pins\"\npins_per_frame = 10\nhit_rule = \"first\"",
    )]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    // Elzinga, Salzer & Willoughby 1998 (docs/methods.md section 2, computed):
    // a 10-pin frame with first hits 4 grass, 3 forb, 2 litter, 1 bare fills it.
    let hits = |h: i64| CoverEntry::Pins(h);
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.cover(
        va,
        &[("GRA1", hits(4)), ("FOR1", hits(3)), ("litter", hits(2))],
    );
    let vb = fx.visit(b, VisitKind::Cover, 14);
    fx.cover(
        vb,
        &[
            ("GRA1", hits(4)),
            ("FOR1", hits(3)),
            ("litter", hits(2)),
            ("bare", hits(1)),
        ],
    );
    let flags = fx.flags(&checks::cover::TOTAL);
    says(
        one(&flags, &la),
        &["add up to 9", "species 7", "ground 2", "10 pins"],
    );
    none(&flags, &lb);
}

#[test]
fn cover_over_100_uses_the_lower_limits_of_classes() {
    let mut fx = Fx::new(&[CLASS_COVER]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let class = |c: &str| CoverEntry::Class(c.into());
    // Daubenmire 1959 lower limits: class 4 from 50 %, class 2 from 5 %.
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.cover(
        va,
        &[
            ("GRA1", class("4")),
            ("GRA2", class("4")),
            ("FOR1", class("2")),
            ("litter", class("2")),
        ],
    ); // 50 + 50 + 5 + 5 = 110
    let vb = fx.visit(b, VisitKind::Cover, 14);
    fx.cover(
        vb,
        &[
            ("GRA1", class("4")),
            ("GRA2", class("4")),
            ("FOR1", class("2")),
        ],
    ); // 105
    let flags = fx.flags(&checks::cover::OVER_100);
    says(
        one(&flags, &la),
        &["110 %", "species 105", "ground 5", "100 + 5"],
    );
    none(&flags, &lb);
}

#[test]
fn cover_vegetation_lies_between_the_largest_species_and_their_sum() {
    let mut fx = Fx::new(&[("layered = false", "layered = true")]);
    let p = CoverEntry::Percent;
    let mut labels = Vec::new();
    // Species 30 and 20: overall vegetation between 30 and 50, ± 5 points.
    for (i, veg) in [24.0, 25.0, 56.0, 55.0].into_iter().enumerate() {
        let (cage, label) = fx.cage("S", i);
        let v = fx.visit(cage, VisitKind::Cover, 14);
        fx.cover(
            v,
            &[("GRA1", p(30.0)), ("FOR1", p(20.0)), ("vegetation", p(veg))],
        );
        labels.push(label);
    }
    let flags = fx.flags(&checks::cover::VEGETATION);
    says(one(&flags, &labels[0]), &["24 %", "GRA1 at 30 %"]);
    none(&flags, &labels[1]);
    says(
        one(&flags, &labels[2]),
        &["56 %", "sum of the species, 50 %"],
    );
    none(&flags, &labels[3]);
}

#[test]
fn cover_change_between_surveys_above_the_limit() {
    let mut fx = Fx::new(&[]);
    let p = CoverEntry::Percent;
    let mut labels = Vec::new();
    for (i, (before, after)) in [(10.0, 36.0), (10.0, 35.0), (40.0, 14.0)]
        .into_iter()
        .enumerate()
    {
        let (cage, label) = fx.cage("S", i);
        let v0 = fx.visit(cage, VisitKind::Cover, 0);
        fx.cover(v0, &[("GRA1", p(before))]);
        let v14 = fx.visit(cage, VisitKind::Cover, 14);
        fx.cover(v14, &[("GRA1", p(after))]);
        labels.push(label);
    }
    let flags = fx.flags(&checks::cover::CHANGE);
    let up = one(&flags, &labels[0]);
    says(
        up,
        &[
            "GRA1",
            "10 % on day 0",
            "36 % on day 14",
            "+26 points",
            "25",
        ],
    );
    assert_eq!(up.day, 14);
    assert_eq!(up.related.unwrap().table, "cover_record");
    none(&flags, &labels[1]);
    says(one(&flags, &labels[2]), &["40 %", "14 %", "-26 points"]);
}

#[test]
fn cover_not_plant() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.raw_cover(va, "SLUG", |r| {
        r.value_pct = Some(5.0);
        r.cover_pct = Some(5.0);
    });
    let vb = fx.visit(b, VisitKind::Cover, 14);
    fx.cover(vb, &[("GRA1", CoverEntry::Percent(5.0))]);
    let flags = fx.flags(&checks::cover::NOT_PLANT);
    says(one(&flags, &la), &["SLUG", "herbivore"]);
    none(&flags, &lb);
}

#[test]
fn cover_blank_survey_but_zero_is_a_value() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    let va = fx.visit(a, VisitKind::Cover, 14);
    fx.cover(
        va,
        &[
            ("GRA1", CoverEntry::NotAssessed),
            ("FOR1", CoverEntry::NotAssessed),
        ],
    );
    let vb = fx.visit(b, VisitKind::Cover, 14);
    // 0 = looked, absent; blank = not assessed (docs/methods.md section 2).
    fx.cover(
        vb,
        &[
            ("GRA1", CoverEntry::Percent(0.0)),
            ("FOR1", CoverEntry::NotAssessed),
        ],
    );
    fx.visit(c, VisitKind::Cover, 14);
    let flags = fx.flags(&checks::cover::BLANK_SURVEY);
    says(one(&flags, &la), &["2 rows"]);
    none(&flags, &lb);
    says(one(&flags, &lc), &["no rows"]);
}

// ---- counts ---------------------------------------------------------------

/// A cage of treatment S stocked with the plan's 10 slugs at 09:00 on day 0.
fn stocked(fx: &mut Fx, n: usize) -> (EnclosureId, String) {
    let (cage, label) = fx.cage("S", n);
    let v = fx.visit(cage, VisitKind::Stocking, 0);
    fx.stock(v, "SLUG", StockingKind::Initial, 10);
    (cage, label)
}

#[test]
fn counts_too_many_alive_for_what_was_stocked() {
    let mut fx = Fx::new(&[]);
    let (a, la) = stocked(&mut fx, 0);
    let (b, lb) = stocked(&mut fx, 1);
    let (c, lc) = stocked(&mut fx, 2);
    let (d, ld) = stocked(&mut fx, 3);
    let (e, le) = stocked(&mut fx, 4);
    let census = |fx: &mut Fx, cage, day, alive, dead| {
        let v = fx.visit(cage, VisitKind::Census, day);
        fx.census(v, "SLUG", Some(alive), Some(dead));
        v
    };
    census(&mut fx, a, 3, 10, 1); // 11 of 10
    census(&mut fx, b, 3, 9, 1); // 10 of 10: the boundary
    census(&mut fx, c, 3, 8, 2);
    census(&mut fx, c, 6, 9, 0); // 9, but 2 were found dead before: 8 can be there
    let v = census(&mut fx, d, 3, 4, 0);
    fx.stock(v, "SLUG", StockingKind::Restock, 6);
    census(&mut fx, d, 6, 10, 0); // restocked to 10
    // A census entered twice on one day does not subtract its dead twice.
    let twice = fx.visit_at(e, VisitKind::Census, Some(3), at(3, 9, 0), Some("tester"));
    fx.census(twice, "SLUG", Some(8), Some(2));
    let again = fx.visit_at(e, VisitKind::Census, Some(3), at(3, 9, 5), Some("tester"));
    fx.census(again, "SLUG", Some(8), Some(2));
    let flags = fx.flags(&checks::counts::TOO_MANY);
    says(
        one(&flags, &la),
        &[
            "10 SLUG found alive and 1 dead",
            "11 in all",
            "at most 10",
            "10 stocked",
        ],
    );
    none(&flags, &lb);
    let f = one(&flags, &lc);
    assert_eq!(f.day, 6);
    says(f, &["at most 8", "2 found dead before"]);
    none(&flags, &ld);
    none(&flags, &le);
}

#[test]
fn counts_contamination_of_herbivores_and_predators() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("P", 0);
    let (b, lb) = fx.cage("P", 1);
    let (c, lc) = stocked(&mut fx, 0);
    let va = fx.visit(a, VisitKind::Census, 3);
    fx.census(va, "SLUG", Some(1), Some(0));
    let vb = fx.visit(b, VisitKind::Census, 3);
    fx.census(vb, "SLUG", Some(0), Some(0));
    fx.census(vb, "BEET", Some(0), Some(0));
    let vc = fx.visit(c, VisitKind::Census, 3);
    fx.census(vc, "BEET", Some(0), Some(1));
    let flags = fx.flags(&checks::counts::CONTAMINATION);
    says(
        one(&flags, &la),
        &["1 SLUG found alive", "treatment P", "no herbivores"],
    );
    none(&flags, &lb);
    says(
        one(&flags, &lc),
        &[
            "0 BEET found alive and 1 dead",
            "treatment S",
            "no predators",
        ],
    );
}

#[test]
fn counts_before_stocking() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    let (d, ld) = fx.cage("P", 0);
    let early = fx.visit_at(a, VisitKind::Census, None, at(0, 8, 0), Some("tester"));
    fx.census(early, "SLUG", Some(0), Some(0));
    let s = fx.visit_at(a, VisitKind::Stocking, Some(0), at(0, 9, 0), Some("tester"));
    fx.stock(s, "SLUG", StockingKind::Initial, 10);
    // Same minute as the stocking: not before it.
    let s = fx.visit_at(b, VisitKind::Stocking, Some(0), at(0, 9, 0), Some("tester"));
    fx.stock(s, "SLUG", StockingKind::Initial, 10);
    fx.visit_at(b, VisitKind::Census, None, at(0, 9, 0), Some("tester"));
    fx.visit(c, VisitKind::Census, 3); // never stocked
    fx.visit(d, VisitKind::Census, 3); // plants only: nothing to stock
    let flags = fx.flags(&checks::counts::BEFORE_STOCKING);
    says(one(&flags, &la), &["2026-05-11 08:00", "2026-05-11 09:00"]);
    none(&flags, &lb);
    says(one(&flags, &lc), &["no initial stocking", "treatment S"]);
    none(&flags, &ld);
}

#[test]
fn counts_restock_due_below_the_threshold() {
    let mut fx = Fx::new(&[]);
    let (a, la) = stocked(&mut fx, 0);
    let (b, lb) = stocked(&mut fx, 1);
    let (c, lc) = stocked(&mut fx, 2);
    let va = fx.visit(a, VisitKind::Census, 3);
    fx.census(va, "SLUG", Some(4), Some(0));
    let vb = fx.visit(b, VisitKind::Census, 3);
    fx.census(vb, "SLUG", Some(5), Some(0));
    let vc = fx.visit(c, VisitKind::Census, 3);
    fx.census(vc, "SLUG", Some(4), Some(0));
    fx.stock(vc, "SLUG", StockingKind::Restock, 6);
    let flags = fx.flags(&checks::counts::RESTOCK_DUE);
    let f = one(&flags, &la);
    assert_eq!(f.severity, Severity::Notice);
    says(f, &["4 SLUG alive", "threshold of 5"]);
    assert!(f.fix.contains("Restock 6 SLUG"), "{}", f.fix);
    none(&flags, &lb);
    none(&flags, &lc);
}

// ---- damage ---------------------------------------------------------------

#[test]
fn damage_method_and_derived_percent() {
    let mut fx = Fx::new(&[]);
    let mut labels = Vec::new();
    let mut cases = Vec::new();
    for i in 0..3 {
        let (cage, label) = fx.cage("S", i);
        let leaf = fx.leaf(cage, &format!("{label}-T1"), 0);
        cases.push((fx.visit(cage, VisitKind::Damage, 7), leaf));
        labels.push(label);
    }
    let raw = |fx: &mut Fx,
               (visit, leaf): (VisitId, LeafId),
               class: Option<&str>,
               value: Option<f64>,
               pct: f64| {
        fx.write(|w| {
            let id = DamageRecordId(w.new_id());
            w.insert(&DamageRecord {
                id,
                visit_id: visit,
                leaf_id: leaf,
                class_code: class.map(str::to_owned),
                value_pct: value,
                damage_pct: Some(pct),
                notes: None,
            })
        })
    };
    raw(&mut fx, cases[0], None, Some(10.0), 10.0);
    // Dirzo & Domínguez 1995 classes (from memory): class 2 has midpoint 9 %.
    raw(&mut fx, cases[1], Some("2"), None, 10.0);
    fx.damage(cases[2].0, cases[2].1, DamageEntry::Class("2".into()));
    let flags = fx.flags(&checks::damage::METHOD);
    says(
        one(&flags, &labels[0]),
        &["percent of 10", "damage classes"],
    );
    says(
        one(&flags, &labels[1]),
        &["damage_pct 10 %", "class 2 (9 %)", "gives 9 %"],
    );
    none(&flags, &labels[2]);
}

#[test]
fn damage_not_on_scale_lists_the_scale() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let leaf_a = fx.leaf(a, "A-T1", 0);
    let leaf_b = fx.leaf(b, "B-T1", 0);
    let va = fx.visit(a, VisitKind::Damage, 7);
    fx.write(|w| {
        let id = DamageRecordId(w.new_id());
        w.insert(&DamageRecord {
            id,
            visit_id: va,
            leaf_id: leaf_a,
            class_code: Some("6".into()),
            value_pct: None,
            damage_pct: None,
            notes: None,
        })
    });
    let vb = fx.visit(b, VisitKind::Damage, 7);
    // Dirzo & Domínguez 1995 (from memory): classes 0-5; 5 is the top class.
    fx.damage(vb, leaf_b, DamageEntry::Class("5".into()));
    let flags = fx.flags(&checks::damage::NOT_ON_SCALE);
    says(one(&flags, &la), &["A-T1", "\"6\"", "0, 1, 2, 3, 4, 5"]);
    none(&flags, &lb);
}

#[test]
fn damage_decrease_on_a_leaf_without_a_fate() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let class = |c: &str| DamageEntry::Class(c.into());
    let falls = fx.leaf(a, "A-T1", 0);
    let stays = fx.leaf(a, "A-T2", 0);
    let lost = fx.leaf(b, "B-T1", 0);
    let a7 = fx.visit(a, VisitKind::Damage, 7);
    fx.damage(a7, falls, class("2"));
    fx.damage(a7, stays, class("2"));
    let a14 = fx.visit(a, VisitKind::Damage, 14);
    fx.damage(a14, falls, class("1"));
    fx.damage(a14, stays, class("2")); // equal is not lower
    let b7 = fx.visit(b, VisitKind::Damage, 7);
    fx.damage(b7, lost, class("2"));
    let b14 = fx.visit(b, VisitKind::Damage, 14);
    fx.damage(b14, lost, class("1"));
    fx.write(|w| record::set_leaf_fate(w, lost, LeafFate::Lost, start() + Duration::days(14)));
    let flags = fx.flags(&checks::damage::DECREASE);
    // Dirzo & Domínguez 1995 midpoints (from memory): class 1 3.5 %, class 2 9 %.
    let f = one(&flags, &la);
    says(
        f,
        &[
            "A-T1",
            "class 1 (3.5 %) on day 14",
            "class 2 (9 %) on day 7",
        ],
    );
    assert_eq!(f.related.unwrap().table, "damage_record");
    none(&flags, &lb);
}

#[test]
fn damage_leaf_unscored_without_a_fate() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let scored = fx.leaf(a, "A-T1", 0);
    fx.leaf(a, "A-T2", 0); // not scored, no fate
    let gone = fx.leaf(a, "A-T3", 0);
    fx.write(|w| record::set_leaf_fate(w, gone, LeafFate::Lost, start() + Duration::days(7)));
    fx.leaf(a, "A-T4", 8); // tagged after the visit
    let all = fx.leaf(b, "B-T1", 0);
    let va = fx.visit(a, VisitKind::Damage, 7);
    fx.damage(va, scored, DamageEntry::Class("1".into()));
    let vb = fx.visit(b, VisitKind::Damage, 7);
    fx.damage(vb, all, DamageEntry::Class("1".into()));
    let flags = fx.flags(&checks::damage::LEAF_UNSCORED);
    let f = one(&flags, &la);
    says(f, &["A-T2", "day 7"]);
    assert_eq!(
        (f.record.table, f.related.unwrap().table),
        ("tagged_leaf", "visit")
    );
    none(&flags, &lb);
}

#[test]
fn damage_in_control_above_the_limit() {
    let mut fx = Fx::new(&[(
        "method = \"class\"\nscale = \"dirzo-dominguez\"",
        "method = \"percent\"",
    )]);
    let mut labels = Vec::new();
    for (i, (treatment, n, pct)) in [("P", 0, 15.5), ("P", 1, 15.0), ("S", 0, 50.0)]
        .into_iter()
        .enumerate()
    {
        let (cage, label) = fx.cage(treatment, n);
        let leaf = fx.leaf(cage, &format!("L{i}"), 0);
        let v = fx.visit(cage, VisitKind::Damage, 7);
        fx.damage(v, leaf, DamageEntry::Percent(pct));
        labels.push(label);
    }
    let flags = fx.flags(&checks::damage::IN_CONTROL);
    says(one(&flags, &labels[0]), &["15.5 %", "treatment P", "15 %"]);
    none(&flags, &labels[1]);
    none(&flags, &labels[2]);
}

// ---- visits ---------------------------------------------------------------

#[test]
fn visits_missing_after_the_grace_days() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (_, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    fx.visit(a, VisitKind::Census, 3);
    // An unscheduled census within the window (day 3 + 1 grace day) counts.
    fx.visit_at(c, VisitKind::Census, None, at(4, 9, 0), Some("tester"));
    let day3 = fx
        .store
        .list::<ScheduleEntry>()
        .unwrap()
        .into_iter()
        .find(|e| e.kind == VisitKind::Census && e.day == 3)
        .unwrap()
        .id;
    let census_day3 = |flags: Vec<Flag>| -> Vec<Flag> {
        flags
            .into_iter()
            .filter(|f| f.related.is_some_and(|r| r.id == day3.0))
            .collect()
    };
    // On day 4 (the last day on time) it is not yet missing; after it, it is.
    assert!(census_day3(fx.flags_on(&checks::visits::MISSING, 3)).is_empty());
    let flags = census_day3(fx.flags_on(&checks::visits::MISSING, 4));
    none(&flags, &la);
    let f = one(&flags, &lb);
    assert_eq!(f.day, 4);
    says(
        f,
        &[
            "census planned on day 3",
            "2026-05-14",
            "due by day 4",
            "1 grace day",
        ],
    );
    none(&flags, &lc);
}

#[test]
fn visits_future_and_before_start() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    let (d, ld) = fx.cage("S", 3);
    fx.visit_at(a, VisitKind::Census, None, at(11, 7, 0), Some("tester"));
    fx.visit_at(b, VisitKind::Census, None, at(10, 23, 59), Some("tester"));
    fx.visit_at(c, VisitKind::Census, None, at(-1, 9, 0), Some("tester"));
    fx.visit_at(d, VisitKind::Census, None, at(0, 0, 0), Some("tester"));
    let future = fx.flags_on(&checks::visits::FUTURE, 10);
    says(
        one(&future, &la),
        &["2026-05-22 07:00", "after today (2026-05-21)"],
    );
    none(&future, &lb);
    let early = fx.flags_on(&checks::visits::BEFORE_START, 10);
    let f = one(&early, &lc);
    assert_eq!(f.day, -1);
    says(f, &["2026-05-10 09:00", "2026-05-11"]);
    none(&early, &ld);
}

#[test]
fn visits_duplicate_of_one_kind_on_one_day() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    let first = fx.visit_at(a, VisitKind::Census, Some(3), at(3, 9, 0), Some("tester"));
    fx.visit_at(a, VisitKind::Census, Some(3), at(3, 9, 5), Some("tester"));
    fx.visit_at(b, VisitKind::Census, Some(3), at(3, 23, 59), Some("tester"));
    fx.visit_at(b, VisitKind::Census, Some(6), at(4, 0, 1), Some("tester"));
    fx.visit(c, VisitKind::Census, 14);
    fx.visit(c, VisitKind::Cover, 14);
    let flags = fx.flags(&checks::visits::DUPLICATE);
    let f = one(&flags, &la);
    says(f, &["Two census visits", "day 3", "09:00", "09:05"]);
    assert_eq!(f.related.unwrap().id, first.0);
    none(&flags, &lb);
    none(&flags, &lc);
}

#[test]
fn visits_incomplete_survey() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    let (c, lc) = fx.cage("S", 2);
    let va = fx.visit(a, VisitKind::Census, 3);
    fx.census(va, "SLUG", Some(9), Some(0));
    let vb = fx.visit(b, VisitKind::Census, 3);
    fx.census(vb, "SLUG", Some(9), Some(0));
    fx.census(vb, "BEET", None, None); // a blank row: not assessed, but recorded
    let vc = fx.visit(c, VisitKind::Cover, 14);
    fx.cover(vc, &[("GRA1", CoverEntry::Percent(60.0))]);
    let flags = fx.flags(&checks::visits::INCOMPLETE);
    says(one(&flags, &la), &["1 of the 2 animal taxa: BEET"]);
    none(&flags, &lb);
    says(one(&flags, &lc), &["7 of the 8 plant taxa", "CLO1"]);
}

#[test]
fn visits_no_observer() {
    let mut fx = Fx::new(&[]);
    let (a, la) = fx.cage("S", 0);
    let (b, lb) = fx.cage("S", 1);
    fx.visit_at(a, VisitKind::Census, Some(3), at(3, 9, 0), None);
    fx.visit_at(b, VisitKind::Census, Some(3), at(3, 9, 0), Some("crew-A"));
    let flags = fx.flags(&checks::visits::NO_OBSERVER);
    says(one(&flags, &la), &["census visit of day 3", "no observer"]);
    none(&flags, &lb);
}

// ---- the rule catalogue ---------------------------------------------------

#[test]
fn every_rule_has_a_unique_dotted_id_of_its_family_and_is_documented() {
    let developers =
        std::fs::read_to_string(crate::util::repo_root().join("DEVELOPERS.md")).unwrap();
    let pattern = tables::get("flag").unwrap().field("rule_id").unwrap();
    let mut ids = std::collections::HashSet::new();
    for rule in checks::rules() {
        assert!(ids.insert(rule.id), "{} is used twice", rule.id);
        assert!(
            rule.id.starts_with(&format!("{}.", rule.family)),
            "{} belongs to family {}",
            rule.id,
            rule.family
        );
        assert!(
            pattern.check(&Value::Text(rule.id.to_owned())).is_ok(),
            "{}",
            rule.id
        );
        assert!(
            developers.contains(&format!("`{}`", rule.id)),
            "DEVELOPERS.md lists {}",
            rule.id
        );
    }
    assert_eq!(ids.len(), 24);
}

// ---- the demo season ------------------------------------------------------

/// Every flag the demo season raises: its 8 planted problems, plus the two
/// jumps the C-12 typo makes in FOR1's cover (into day 14 and out of it at day
/// 28). The missing day-18 census at C-15 belongs to day 19, its last day on
/// time (1 grace day).
const DEMO_FLAGS: &[(&str, i64, &str)] = &[
    ("C-01", 9, "visits.no_observer"),
    ("C-05", 21, "damage.decrease"),
    ("C-08", 12, "counts.too_many"),
    ("C-12", 14, "cover.total"),
    ("C-12", 14, "cover.change"),
    ("C-12", 28, "cover.change"),
    ("C-15", 19, "visits.missing"),
    ("C-16", 21, "counts.contamination"),
    ("C-18", 28, "damage.leaf_unscored"),
    ("C-24", 27, "visits.duplicate"),
];

fn demo_check_day() -> NaiveDate {
    demo::check_day(&demo::definition().unwrap())
}

fn triples(flags: &[Flag]) -> Vec<(String, i64, String)> {
    let mut v: Vec<(String, i64, String)> = flags
        .iter()
        .map(|f| (f.cage.clone(), f.day, f.rule_id.to_owned()))
        .collect();
    v.sort();
    v
}

fn expected() -> Vec<(String, i64, String)> {
    let mut v: Vec<(String, i64, String)> = DEMO_FLAGS
        .iter()
        .map(|(c, d, r)| ((*c).to_owned(), *d, (*r).to_owned()))
        .collect();
    v.sort();
    v
}

#[test]
fn the_demo_season_raises_exactly_its_planted_problems() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let flags = checks::check(&store, &Scope::Season, demo_check_day()).unwrap();
    assert_eq!(triples(&flags), expected());
    // Months later nothing more is due, so nothing more is raised.
    let later = checks::check(&store, &Scope::Season, start() + Duration::days(200)).unwrap();
    assert_eq!(triples(&later), expected());
    // Every planted problem is found in its cage, on its day or (a missing
    // visit) on its last day on time; every other cage raises nothing.
    let problems = demo::planted_problems(&store).unwrap();
    for p in &problems {
        assert!(
            flags
                .iter()
                .any(|f| f.cage == p.enclosure && (f.day == p.day || f.day == p.day + 1)),
            "{p:?} is found"
        );
    }
    for f in &flags {
        assert!(
            problems.iter().any(|p| p.enclosure == f.cage),
            "{} in {} is not a planted problem",
            f.rule_id,
            f.cage
        );
    }
    // The messages state the numbers of the planted problems.
    let msg = |rule: &str| &flags.iter().find(|f| f.rule_id == rule).unwrap().message;
    assert!(
        msg("cover.total").contains("140.5 %"),
        "{}",
        msg("cover.total")
    );
    assert!(msg("counts.too_many").contains("12 SLUG found alive"));
    assert!(msg("damage.leaf_unscored").contains("C-18-T3"));
}

#[test]
fn the_demo_database_holds_its_flags_with_the_contamination_confirmed() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let enclosures: std::collections::HashMap<EnclosureId, String> = store
        .list::<Enclosure>()
        .unwrap()
        .into_iter()
        .map(|e| (e.id, e.label))
        .collect();
    let stored = store.list::<StoredFlag>().unwrap();
    let mut got: Vec<(String, i64, String)> = stored
        .iter()
        .map(|f| {
            (
                enclosures[&f.enclosure_id].clone(),
                f.day,
                f.rule_id.clone(),
            )
        })
        .collect();
    got.sort();
    assert_eq!(got, expected());
    for f in &stored {
        let confirmed = f.rule_id == "counts.contamination";
        assert_eq!(f.status == FlagStatus::Confirmed, confirmed, "{f:?}");
        assert_eq!(
            f.note.as_deref() == Some(demo::CONFIRMATION_NOTE),
            confirmed
        );
    }
}

// ---- stored flags ---------------------------------------------------------

fn run(store: &mut Store, scope: Scope) -> checks::Report {
    checks::run(store, &scope, demo_check_day()).unwrap()
}

fn flag_of<'a>(
    report: &'a checks::Report,
    cage: &str,
    day: i64,
    rule: &str,
) -> &'a checks::ReportedFlag {
    report
        .flags
        .iter()
        .find(|f| f.cage == cage && f.day == day && f.rule_id == rule)
        .unwrap_or_else(|| panic!("{rule} in {cage} on day {day}"))
}

/// The FOR1 cover row of C-12 at day 14 (the planted typo).
fn typo_row(store: &Store) -> CoverRecord {
    let report_flags = store.list::<StoredFlag>().unwrap();
    let change = report_flags
        .iter()
        .find(|f| f.rule_id == "cover.change" && f.day == 14)
        .unwrap();
    store.get::<CoverRecord>(change.record_id).unwrap().unwrap()
}

fn set_cover(store: &mut Store, row: &CoverRecord, pct: f64) {
    let schema = tables::get("cover_record").unwrap();
    store
        .write(|w| {
            w.update_fields(
                schema,
                &row.id.to_string(),
                &[
                    ("value_pct", Value::Real(pct)),
                    ("cover_pct", Value::Real(pct)),
                ],
            )
        })
        .unwrap();
}

#[test]
fn running_the_checks_again_changes_nothing() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let flags = store.list::<StoredFlag>().unwrap();
    let changes = store.change_count().unwrap();
    let report = run(&mut store, Scope::Season);
    assert_eq!(report.changes, checks::Changes::default());
    assert_eq!(store.change_count().unwrap(), changes);
    assert_eq!(store.list::<StoredFlag>().unwrap(), flags);
    assert_eq!((report.open, report.confirmed, report.fixed), (9, 1, 0));
    assert_eq!(report.open_errors, 6);
}

#[test]
fn a_corrected_value_fixes_its_flags_and_a_new_error_reopens_them() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let before = run(&mut store, Scope::Season);
    let total = flag_of(&before, "C-12", 14, "cover.total").clone();
    let row = typo_row(&store);
    set_cover(&mut store, &row, 4.5);
    let fixed = run(&mut store, Scope::Season);
    // cover.total and both jumps go; nothing else changes.
    assert_eq!(fixed.changes.fixed, 3);
    assert_eq!(
        fixed.changes.new + fixed.changes.reopened + fixed.changes.updated,
        0
    );
    assert_eq!(
        flag_of(&fixed, "C-12", 14, "cover.total").status,
        FlagStatus::Fixed
    );
    assert_eq!(fixed.open, 6);
    // The fix went through the write path: the status change is in the log.
    let logged: i64 = store
        .raw()
        .query_row(
            "SELECT count(*) FROM change_log WHERE table_name = 'flag' AND row_id = ?1 \
             AND field = 'status' AND old_value = 'open' AND new_value = 'fixed'",
            [total.id.to_string()],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(logged, 1);
    // The typo comes back (another decimal slip): the same flags open again,
    // with the new numbers.
    set_cover(&mut store, &row, 54.0);
    let again = run(&mut store, Scope::Season);
    assert_eq!(again.changes.reopened, 3);
    let reopened = flag_of(&again, "C-12", 14, "cover.total");
    assert_eq!((reopened.id, reopened.status), (total.id, FlagStatus::Open));
    assert!(reopened.message.contains("149.5 %"), "{}", reopened.message);
}

#[test]
fn a_confirmed_flag_stays_confirmed_and_keeps_its_note_when_fixed() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let report = run(&mut store, Scope::Season);
    let confirmed = flag_of(&report, "C-16", 21, "counts.contamination").clone();
    assert_eq!(confirmed.status, FlagStatus::Confirmed);
    // Still raised: still confirmed, same note.
    let again = run(&mut store, Scope::Cage("C-16".into()));
    assert_eq!(again.flags, vec![confirmed.clone()]);
    assert!(!again.has_open_errors());
    // Corrected after all: fixed, and the note stays with it.
    let schema = tables::get("census").unwrap();
    store
        .write(|w| {
            w.update_fields(
                schema,
                &confirmed.record_id.to_string(),
                &[("alive", Value::Integer(0))],
            )
        })
        .unwrap();
    let after = run(&mut store, Scope::Cage("C-16".into()));
    assert_eq!(after.flags.len(), 1);
    assert_eq!(after.flags[0].status, FlagStatus::Fixed);
    assert_eq!(after.flags[0].note, confirmed.note);
}

#[test]
fn confirming_needs_a_note_and_a_flag_that_is_still_raised() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let report = run(&mut store, Scope::Season);
    let too_many = flag_of(&report, "C-08", 12, "counts.too_many").clone();
    let id = too_many.id.to_string();
    let err = checks::confirm(&mut store, &id, "  ")
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("flag.note") && err.contains("required"),
        "{err}"
    );
    let err = checks::confirm(&mut store, "abc", "n")
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("flag.id") && err.contains("last 6 characters"),
        "{err}"
    );
    let err = checks::confirm(&mut store, "ffffffffffff", "n")
        .unwrap_err()
        .to_string();
    assert!(err.contains("not found"), "{err}");
    // The end of the id, as the text report prints it, is enough.
    let done = checks::confirm(
        &mut store,
        &id[id.len() - 8..],
        " Two cages' sheets were swapped; 12 is right. ",
    )
    .unwrap();
    assert_eq!(done.status, FlagStatus::Confirmed);
    assert_eq!(
        done.note.as_deref(),
        Some("Two cages' sheets were swapped; 12 is right.")
    );
    assert_eq!(
        store
            .list::<StoredFlag>()
            .unwrap()
            .iter()
            .filter(|f| f.status == FlagStatus::Confirmed)
            .count(),
        2
    );
    // A fixed flag is not raised any more: nothing to confirm.
    let row = typo_row(&store);
    set_cover(&mut store, &row, 4.5);
    let fixed = run(&mut store, Scope::Season);
    let total = flag_of(&fixed, "C-12", 14, "cover.total");
    let err = checks::confirm(&mut store, &total.id.to_string(), "fine")
        .unwrap_err()
        .to_string();
    assert!(err.contains("is fixed"), "{err}");
}

#[test]
fn a_day_run_reconciles_only_that_day() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let row = typo_row(&store);
    set_cover(&mut store, &row, 4.5);
    let day14 = run(&mut store, Scope::Day(start() + Duration::days(14)));
    // Only the two day-14 flags of C-12 are in the scope, and both are fixed.
    assert_eq!(day14.flags.len(), 2);
    assert_eq!(day14.changes.fixed, 2);
    assert!(
        day14
            .flags
            .iter()
            .all(|f| f.status == FlagStatus::Fixed && f.day == 14)
    );
    let stored = store.list::<StoredFlag>().unwrap();
    let day28 = stored
        .iter()
        .find(|f| f.rule_id == "cover.change" && f.day == 28)
        .unwrap();
    assert_eq!(
        day28.status,
        FlagStatus::Open,
        "day 28 is not checked by a day-14 run"
    );
    let season = run(&mut store, Scope::Season);
    assert_eq!(season.changes.fixed, 1);
}

#[test]
fn confirmed_flags_survive_export_and_import() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let folder = tmp.path("export");
    fieldcage_core::export::export(&store, &folder).unwrap();
    let mut copy = tmp.store("copy.db");
    fieldcage_core::import::import(&mut copy, &folder).unwrap();
    let flags = store.list::<StoredFlag>().unwrap();
    assert_eq!(copy.list::<StoredFlag>().unwrap(), flags);
    let confirmed: Vec<&StoredFlag> = flags
        .iter()
        .filter(|f| f.status == FlagStatus::Confirmed)
        .collect();
    assert_eq!(confirmed.len(), 1);
    assert_eq!(confirmed[0].note.as_deref(), Some(demo::CONFIRMATION_NOTE));
    // The imported flags are the same flags: checking the copy changes nothing.
    let report = run(&mut copy, Scope::Season);
    assert_eq!(report.changes, checks::Changes::default());
    assert_eq!(report.confirmed, 1);
}

/// A synthetic season is drawn within what the checks accept, except for the
/// cover totals that chance pushes past 100 %: the checks raise exactly those,
/// as an independent SQL sum finds them, and store them without a clash.
#[test]
fn a_synthetic_season_raises_only_its_chance_cover_totals() {
    let tmp = Temp::new();
    let mut store = tmp.store("synthetic.db");
    let size = fieldcage_testkit::synth::SeasonSize {
        cages: 8,
        visits: 5,
        species: 10,
    };
    fieldcage_testkit::synth::build(&mut store, size, 1).unwrap();
    let today = NaiveDate::from_ymd_opt(2026, 4, 30).unwrap();
    let flags = checks::check(&store, &Scope::Season, today).unwrap();
    assert!(
        flags.iter().all(|f| f.rule_id == "cover.total"),
        "{flags:#?}"
    );
    let off: i64 = store
        .raw()
        .query_row(
            "SELECT count(*) FROM (SELECT sum(c.cover_pct) AS total FROM visit v \
             JOIN cover_record c ON c.visit_id = v.id WHERE v.kind = 'cover' \
             GROUP BY v.id HAVING abs(total - 100) > 5)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert!(off > 0, "the season has a few totals above 100 %");
    assert_eq!(flags.len() as i64, off);
    let report = checks::run(&mut store, &Scope::Season, today).unwrap();
    assert_eq!(report.changes.new as i64, off);
}

// ----- Issue 14: the route, the sheet, field entry and the checks agree -----

/// A service on a second connection to the fixture's database.
fn service_on(fx: &Fx) -> fieldcage_ops::Service {
    fieldcage_ops::Service::new(Store::open(fx.store.path()).unwrap())
}

/// The census days the checks call missing in a cage, as of the end of `day`.
fn missing_census(fx: &Fx, label: &str, day: i64) -> Vec<i64> {
    let entries = fx.store.list::<ScheduleEntry>().unwrap();
    let mut days: Vec<i64> = fx
        .flags_on(&checks::visits::MISSING, day)
        .into_iter()
        .filter(|f| f.cage == label)
        .filter_map(|f| {
            let e = entries
                .iter()
                .find(|e| Some(e.id.0) == f.related.as_ref().map(|r| r.id))?;
            (e.kind == VisitKind::Census).then_some(e.day)
        })
        .collect();
    days.sort();
    days
}

/// What the route says of a cage at the start of `day`: census days overdue,
/// census days late (still in their grace days), and the cage's state.
fn route_of(fx: &Fx, label: &str, day: i64) -> (Vec<i64>, Vec<i64>, String) {
    let date = start() + Duration::days(day);
    let route = service_on(fx)
        .call("route", serde_json::json!({ "date": date }))
        .unwrap();
    let cage = route["blocks"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|b| b["cages"].as_array().unwrap().clone())
        .find(|c| c["label"] == label)
        .unwrap();
    let census_days = |list: &serde_json::Value| -> Vec<i64> {
        list.as_array()
            .unwrap()
            .iter()
            .filter(|p| p["kind"] == "census")
            .map(|p| p["day"].as_i64().unwrap())
            .collect()
    };
    (
        census_days(&cage["overdue"]),
        census_days(&cage["late"]),
        cage["state"].as_str().unwrap().to_owned(),
    )
}

/// What the cage's sheet lists as still to do at the start of `day`: census
/// days late (planned earlier, still in their grace days).
fn sheet_late(fx: &Fx, cage: EnclosureId, day: i64) -> Vec<i64> {
    let date = start() + Duration::days(day);
    let sheet = service_on(fx)
        .call(
            "sheet",
            serde_json::json!({ "enclosure_id": cage, "date": date }),
        )
        .unwrap();
    sheet["late"]
        .as_array()
        .expect("the sheet lists late visits")
        .iter()
        .filter(|p| p["kind"] == "census")
        .map(|p| p["day"].as_i64().unwrap())
        .collect()
}

/// Cages of treatment S with their day-0 stocking and cover made, so that
/// only the censuses are in question.
fn cages_ready(fx: &mut Fx, n: usize) -> Vec<(EnclosureId, String)> {
    (0..n)
        .map(|i| {
            let (id, label) = fx.cage("S", i);
            for kind in [VisitKind::Stocking, VisitKind::Cover] {
                let v = fx.visit(id, kind, 0);
                fx.write(|w| record::complete_visit(w, v));
            }
            (id, label)
        })
        .collect()
}

#[test]
fn regression_14_route_and_checks_agree_on_which_visits_are_made_and_missed() {
    let mut fx = Fx::new(&[]);
    let cages = cages_ready(&mut fx, 3);
    let [(a, la), (b, lb), (_, lc)] = [cages[0].clone(), cages[1].clone(), cages[2].clone()];
    // A: a census recorded for no planned day, made on day 4, inside census
    // 3's window (day 3 + 1 grace day): it fulfils census 3.
    let va = fx.visit_at(a, VisitKind::Census, None, at(4, 9, 0), Some("tester"));
    fx.write(|w| record::complete_visit(w, va));
    // B: a census recorded for day 3 but made on day 6: it fulfils census 3,
    // not census 6.
    let vb = fx.visit_at(b, VisitKind::Census, Some(3), at(6, 9, 0), Some("tester"));
    fx.write(|w| record::complete_visit(w, vb));
    // C: no census at all.

    // The route at the start of a day and the checks at the end of the day
    // before give one answer, every day, in every cage (a rule of our own:
    // common practice of a schedule with grace days).
    for day in 1..=12 {
        for (id, label) in &cages {
            let (overdue, late, _) = route_of(&fx, label, day);
            assert_eq!(
                overdue,
                missing_census(&fx, label, day - 1),
                "cage {label} on day {day}: route overdue vs checks missing"
            );
            // The sheet says what the route says is still to do.
            assert_eq!(
                sheet_late(&fx, *id, day),
                late,
                "cage {label} on day {day}: sheet late vs route late"
            );
        }
    }
    // A on day 5: census 3 is made (the route used to list it as overdue).
    assert_eq!(route_of(&fx, &la, 5).0, Vec::<i64>::new());
    // B on day 6: census 6 is still to do (the route used to say done,
    // because a completed census was dated that day).
    let (_, _, state) = route_of(&fx, &lb, 6);
    assert_eq!(state, "not_started");
    assert_eq!(route_of(&fx, &lb, 8).0, vec![6]);
    assert_eq!(missing_census(&fx, &lb, 7), vec![6]);
    // C on day 4: census 3 is late but not missed, and the cage has work
    // (the route used to say nothing was due); on day 5 it is overdue.
    let (overdue, late, state) = route_of(&fx, &lc, 4);
    assert_eq!((overdue, late), (vec![], vec![3]));
    assert_eq!(state, "not_started");
    assert_eq!(missing_census(&fx, &lc, 3), Vec::<i64>::new());
    assert_eq!(route_of(&fx, &lc, 5).0, vec![3]);
    assert_eq!(missing_census(&fx, &lc, 4), vec![3]);
}

#[test]
fn regression_14_a_census_after_the_planned_one_was_made_is_unplanned() {
    let mut fx = Fx::new(&[]);
    let (a, _) = cages_ready(&mut fx, 1)[0].clone();
    // Census 3 made on day 3, recorded for no planned day (an import, an
    // older device): it fulfils census 3.
    fx.visit_at(a, VisitKind::Census, None, at(3, 9, 0), Some("tester"));
    let slug = fx.taxon("SLUG");
    let saved = service_on(&fx)
        .call(
            "save_census",
            serde_json::json!({
                "enclosure_id": a, "taxon_id": slug, "alive": 9, "dead": 0, "missing": 1,
                "date": start() + Duration::days(4), "observer": "tester",
            }),
        )
        .unwrap();
    let visit_id = saved["visit_id"].as_str().unwrap().to_owned();
    let visit = fx
        .store
        .list::<Visit>()
        .unwrap()
        .into_iter()
        .find(|v| v.id.to_string() == visit_id)
        .unwrap();
    // The day-4 census fulfils no planned census that is still open, so it
    // is recorded for none (it used to be recorded for census 3, a second
    // census of day 3 in the results).
    assert_eq!(visit.day, None);
    let results = fieldcage_core::analysis::analyse(&fx.store, &Default::default()).unwrap();
    assert!(
        !results
            .notes
            .iter()
            .any(|n| n.contains("more than one census visit on day 3")),
        "{:?}",
        results.notes
    );
}

#[test]
fn regression_14_the_sheet_and_the_checks_agree_on_a_restock() {
    let mut fx = Fx::new(&[]);
    let (a, la) = cages_ready(&mut fx, 1)[0].clone();
    let slug = fx.taxon("SLUG");
    let day3 = start() + Duration::days(3);
    let service = service_on(&fx);
    service
        .call(
            "save_census",
            serde_json::json!({
                "enclosure_id": a, "taxon_id": slug, "alive": 4, "dead": 1, "missing": 5,
                "date": day3, "observer": "tester",
            }),
        )
        .unwrap();
    let suggested = |service: &fieldcage_ops::Service| -> serde_json::Value {
        let sheet = service
            .call(
                "sheet",
                serde_json::json!({ "enclosure_id": a, "date": day3 }),
            )
            .unwrap();
        sheet["animals"]
            .as_array()
            .unwrap()
            .iter()
            .find(|l| l["taxon"]["code"] == "SLUG")
            .unwrap()["restock_suggested"]
            .clone()
    };
    // The demo plan: 10 slugs, restock below 5 (invented); 4 alive → 6.
    assert_eq!(suggested(&service), serde_json::json!(6));
    assert_eq!(
        fx.flags_on(&checks::counts::RESTOCK_DUE, 3)
            .iter()
            .filter(|f| f.cage == la)
            .count(),
        1
    );
    service
        .call(
            "save_stocking",
            serde_json::json!({
                "enclosure_id": a, "taxon_id": slug, "kind": "restock", "count": 6,
                "date": day3, "observer": "tester",
            }),
        )
        .unwrap();
    // Restocked that day: the sheet no longer offers it (it used to offer
    // the same restock again), and the checks raise nothing.
    assert_eq!(suggested(&service), serde_json::Value::Null);
    assert!(
        fx.flags_on(&checks::counts::RESTOCK_DUE, 3)
            .iter()
            .all(|f| f.cage != la)
    );
}

#[test]
fn regression_14_an_unplanned_damage_visit_in_the_window_must_score_every_leaf() {
    let mut fx = Fx::new(&[]);
    let (a, la) = cages_ready(&mut fx, 1)[0].clone();
    fx.leaf(a, "T1", 0);
    // Damage 7 made on day 8 (inside its grace day), recorded for no planned
    // day, scoring no leaf: it fulfils damage 7 for visits.missing, so it
    // must also score the leaf (it used to pass both rules silently).
    fx.visit_at(a, VisitKind::Damage, None, at(8, 9, 0), Some("tester"));
    let unscored: Vec<Flag> = fx
        .flags_on(&checks::damage::LEAF_UNSCORED, 10)
        .into_iter()
        .filter(|f| f.cage == la)
        .collect();
    assert_eq!(unscored.len(), 1, "{unscored:?}");
    assert_eq!(unscored[0].day, 8);
    assert!(
        fx.flags_on(&checks::visits::MISSING, 10)
            .iter()
            .filter(|f| f.cage == la)
            .all(|f| !f.message.contains("damage planned on day 7"))
    );
}
