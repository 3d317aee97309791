//! Property test of sync (issue 6 acceptance): random edits on 3–4 devices,
//! synced at random moments, cut into change-sets; the change-sets are then
//! delivered to a fresh device in random orders, with duplicate copies and
//! syncs after partial prefixes. Every prefix state and the final state must
//! equal a reference model computed here from the change-sets alone, every
//! order must end in identical tables, each concurrent same-field edit must
//! give exactly one conflict, and no entry may be missing from the log.
//!
//! The reference model is written independently of the library's merge: it
//! takes what each device knew from the test's own record of which
//! change-sets each device had applied (not from the library's bookkeeping),
//! and computes per-field last-writer-wins (hybrid logical clock, ties by
//! device id) and conflicts by brute force. The rules are docs/methods.md §10.1
//! (common practice for per-field last-writer-wins replication; no
//! published check values apply).

use crate::util::Raw;
use std::collections::{BTreeMap, BTreeSet};
use std::fs;
use std::path::PathBuf;

use fieldcage_core::model::*;
use fieldcage_core::store::Op;
use fieldcage_core::sync::changeset::{self, ChangeSet};
use fieldcage_core::sync::{self, ConflictChoice};
use fieldcage_core::tables;
use proptest::prelude::*;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rusqlite::types::Value;

use crate::util::{Device, SEASON_MILLIS, Tiny, data_snapshot, fast_temp, fixed_id};

/// One thing a device does.
#[derive(Debug, Clone)]
pub enum Step {
    /// Record a census (visit, taxon, alive); refused locally if the device
    /// already holds one for that visit and taxon.
    NewCensus {
        dev: usize,
        visit: usize,
        taxon: usize,
        alive: i64,
    },
    /// Change `alive` of one of its census rows.
    SetAlive { dev: usize, pick: usize, alive: i64 },
    /// Move a census row to the other taxon (its unique key changes).
    SwapTaxon { dev: usize, pick: usize },
    /// Change the notes of a cage, a treatment or a census row.
    SetNotes {
        dev: usize,
        pick: usize,
        note: Option<&'static str>,
    },
    /// Delete one of its census rows.
    Delete { dev: usize, pick: usize },
    /// Settle one of its open conflicts.
    Resolve { dev: usize, pick: usize, take: bool },
    /// Sync with the shared target.
    Sync { dev: usize },
    /// Every device syncs once, in turn.
    SyncAll,
    /// Let the device's clock run (0 keeps the millisecond: clock ties).
    Tick { dev: usize, millis: i64 },
}

pub fn step() -> impl Strategy<Value = Step> {
    let dev = 0usize..4;
    let note = prop_oneof![Just(None), Just(Some("wet")), Just(Some("dry"))];
    prop_oneof![
        3 => (dev.clone(), 0usize..2, 0usize..2, 0i64..3)
            .prop_map(|(dev, visit, taxon, alive)| Step::NewCensus { dev, visit, taxon, alive }),
        3 => (dev.clone(), any::<usize>(), 0i64..3)
            .prop_map(|(dev, pick, alive)| Step::SetAlive { dev, pick, alive }),
        1 => (dev.clone(), any::<usize>()).prop_map(|(dev, pick)| Step::SwapTaxon { dev, pick }),
        3 => (dev.clone(), any::<usize>(), note)
            .prop_map(|(dev, pick, note)| Step::SetNotes { dev, pick, note }),
        1 => (dev.clone(), any::<usize>()).prop_map(|(dev, pick)| Step::Delete { dev, pick }),
        3 => (dev.clone(), any::<usize>(), any::<bool>())
            .prop_map(|(dev, pick, take)| Step::Resolve { dev, pick, take }),
        4 => dev.clone().prop_map(|dev| Step::Sync { dev }),
        1 => Just(Step::SyncAll),
        2 => (dev, 0i64..3).prop_map(|(dev, millis)| Step::Tick { dev, millis }),
    ]
}

/// What each device had applied of each other device when it made each of
/// its entries, as the test saw it happen: (device, seq) → other → last seq.
type Knowledge = BTreeMap<(String, i64), BTreeMap<String, i64>>;

/// The devices of one scenario and what the test knows about them.
pub struct Scenario {
    pub tmp: crate::util::Temp,
    pub target: PathBuf,
    pub devices: Vec<Device>,
    /// Per device: last seq applied of each other device.
    pub applied: Vec<BTreeMap<String, i64>>,
    pub knowledge: Knowledge,
    next_row: u64,
}

impl Scenario {
    pub fn new(n: usize) -> Scenario {
        let tmp = fast_temp();
        let target = tmp.path("target");
        fs::create_dir_all(&target).unwrap();
        let mut s = Scenario {
            devices: Vec::new(),
            applied: vec![BTreeMap::new(); n],
            knowledge: Knowledge::new(),
            next_row: 1000,
            target,
            tmp,
        };
        for i in 0..n {
            let d = Device::empty(&s.tmp, &format!("dev{i}"), SEASON_MILLIS + i as i64);
            s.devices.push(d);
            s.write(i, |d| Tiny::write(&mut d.store));
        }
        s
    }

    /// Run a local action and record what the device knew for each entry
    /// it made.
    fn write(&mut self, i: usize, f: impl FnOnce(&mut Device)) {
        let before = last_seq(&self.devices[i]);
        f(&mut self.devices[i]);
        let after = last_seq(&self.devices[i]);
        let me = self.devices[i].store.device_id().to_owned();
        for seq in before + 1..=after {
            self.knowledge
                .insert((me.clone(), seq), self.applied[i].clone());
        }
    }

    pub fn sync(&mut self, i: usize) -> sync::SyncReport {
        let target = self.target.clone();
        let report = self.devices[i].sync(&target);
        for a in &report.applied {
            let e = self.applied[i].entry(a.device_id.clone()).or_insert(0);
            assert_eq!(*e + 1, a.first_seq, "applied in sequence: {report}");
            *e = a.last_seq;
        }
        report
    }

    pub fn run(&mut self, step: &Step) {
        let n = self.devices.len();
        match *step {
            Step::NewCensus {
                dev,
                visit,
                taxon,
                alive,
            } => {
                let id = CensusId(fixed_id(self.next_row));
                self.next_row += 1;
                self.write(dev % n, |d| {
                    let c = Census {
                        id,
                        visit_id: Tiny::visits()[visit],
                        taxon_id: Tiny::taxa()[taxon],
                        alive: Some(alive),
                        dead: None,
                        missing: None,
                        notes: None,
                    };
                    let _ = d.store.write(|w| w.insert(&c));
                });
            }
            Step::SetAlive { dev, pick, alive } => self.write(dev % n, |d| {
                if let Some(mut c) = pick_census(d, pick) {
                    c.alive = Some(alive);
                    d.store.write(|w| w.update(&c)).unwrap();
                }
            }),
            Step::SwapTaxon { dev, pick } => self.write(dev % n, |d| {
                if let Some(mut c) = pick_census(d, pick) {
                    let [a, b] = Tiny::taxa();
                    c.taxon_id = if c.taxon_id == a { b } else { a };
                    // Refused when the device holds the other taxon's census.
                    let _ = d.store.write(|w| w.update(&c));
                }
            }),
            Step::SetNotes { dev, pick, note } => self.write(dev % n, |d| {
                let note = note.map(str::to_owned);
                let _ = match pick % 3 {
                    0 => {
                        let id = Tiny::cages()[pick / 3 % 2];
                        let mut e: Enclosure = d.store.get(id.uuid()).unwrap().unwrap();
                        e.notes = note;
                        d.store.write(|w| w.update(&e))
                    }
                    1 => {
                        let id = Tiny::treatments()[pick / 3 % 2];
                        let mut t: Treatment = d.store.get(id.uuid()).unwrap().unwrap();
                        t.notes = note;
                        d.store.write(|w| w.update(&t))
                    }
                    _ => match pick_census(d, pick / 3) {
                        Some(mut c) => {
                            c.notes = note;
                            d.store.write(|w| w.update(&c))
                        }
                        None => Ok(0),
                    },
                };
            }),
            Step::Delete { dev, pick } => self.write(dev % n, |d| {
                if let Some(c) = pick_census(d, pick) {
                    let schema = tables::get("census").unwrap();
                    d.store
                        .write(|w| w.delete(schema, &c.id.to_string()))
                        .unwrap();
                }
            }),
            Step::Resolve { dev, pick, take } => {
                // The first device from `dev` on that has an open conflict.
                let Some(i) = (0..n)
                    .map(|k| (dev + k) % n)
                    .find(|i| !sync::conflicts(&self.devices[*i].store).unwrap().is_empty())
                else {
                    return;
                };
                self.write(i, |d| {
                    let open = sync::conflicts(&d.store).unwrap();
                    let c = &open[pick % open.len()];
                    let choice = if take {
                        ConflictChoice::TakeOther
                    } else {
                        ConflictChoice::KeepCurrent
                    };
                    // Taking the other version may be refused (a key taken again).
                    let _ = sync::resolve_conflict(&mut d.store, &c.key, choice);
                });
            }
            Step::Sync { dev } => {
                self.sync(dev % n);
            }
            Step::SyncAll => {
                for i in 0..n {
                    self.sync(i);
                }
            }
            Step::Tick { dev, millis } => self.devices[dev % n].clock.advance(millis),
        }
    }

    /// Sync every device until none applies anything new.
    pub fn settle(&mut self) {
        loop {
            let mut any = false;
            for i in 0..self.devices.len() {
                let r = self.sync(i);
                any |= !r.applied.is_empty() || !r.written.is_empty();
            }
            if !any {
                break;
            }
        }
    }

    /// Every change-set file in the target.
    pub fn files(&self) -> Vec<PathBuf> {
        let mut out = Vec::new();
        for dir in fs::read_dir(&self.target).unwrap() {
            let dir = dir.unwrap().path();
            if dir.is_dir() {
                for f in fs::read_dir(&dir).unwrap() {
                    out.push(f.unwrap().path());
                }
            }
        }
        out.sort();
        out
    }
}

fn last_seq(d: &Device) -> i64 {
    fieldcage_core::store::log::last_seq(&d.store.raw(), d.store.device_id())
        .unwrap()
        .unwrap_or(0)
}

fn pick_census(d: &Device, pick: usize) -> Option<Census> {
    let live = d.store.list::<Census>().unwrap();
    (!live.is_empty()).then(|| live[pick % live.len()].clone())
}

// ---------------------------------------------------------------------------
// The reference model.

/// One entry as the model sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct Entry {
    pub device: String,
    pub seq: i64,
    pub hlc: i64,
    pub table: String,
    pub row: String,
    pub op: Op,
    pub field: Option<String>,
    pub old: Value,
    pub new: Value,
}

pub fn entries_of(cs: &ChangeSet) -> Vec<Entry> {
    cs.changes
        .iter()
        .map(|c| Entry {
            device: cs.device_id.clone(),
            seq: c.seq,
            hlc: c.hlc,
            table: c.table.to_owned(),
            row: c.row_id.clone(),
            op: c.op,
            field: c.field.map(str::to_owned),
            old: c.old_value.clone(),
            new: c.new_value.clone(),
        })
        .collect()
}

/// x was made by a device that had applied y (or by y's device, later).
fn saw(k: &Knowledge, x: &Entry, y: &Entry) -> bool {
    if x.device == y.device {
        return x.seq > y.seq;
    }
    k.get(&(x.device.clone(), x.seq))
        .and_then(|v| v.get(&y.device))
        .is_some_and(|upto| *upto >= y.seq)
}

fn later(a: &Entry, b: &Entry) -> bool {
    (a.hlc, &a.device, a.seq) > (b.hlc, &b.device, b.seq)
}

fn newest<'e>(list: &[&'e Entry]) -> &'e Entry {
    let mut w = list[0];
    for e in list {
        if later(e, w) {
            w = e;
        }
    }
    w
}

fn equal(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Real(x), Value::Real(y)) => x.to_bits() == y.to_bits(),
        _ => a == b,
    }
}

/// What the tables and the conflict list must hold for a set of entries.
#[derive(Debug, PartialEq)]
pub struct Expected {
    /// Table → rows (schema columns then `deleted`), by id.
    pub tables: BTreeMap<String, Vec<Vec<Value>>>,
    /// (table, row, field, kind, other device, other seq) of every conflict,
    /// duplicates as (table, hidden row, "", "duplicate", "", 0).
    pub conflicts: BTreeSet<(String, String, String, String, String, i64)>,
}

pub fn model(entries: &[Entry], k: &Knowledge) -> Expected {
    let mut rows: BTreeMap<(String, String), Vec<&Entry>> = BTreeMap::new();
    for e in entries {
        rows.entry((e.table.clone(), e.row.clone()))
            .or_default()
            .push(e);
    }
    let mut conflicts = BTreeSet::new();
    let mut state: BTreeMap<(String, String), (Vec<Value>, bool)> = BTreeMap::new();
    for ((table, row), list) in &rows {
        let schema = tables::get(table).unwrap();
        let mut values = vec![Value::Null; schema.fields.len()];
        let existence: Vec<&Entry> = list.iter().copied().filter(|e| e.field.is_none()).collect();
        let delete = (!existence.is_empty())
            .then(|| newest(&existence))
            .filter(|w| w.op == Op::Delete);
        let mut groups: Vec<(String, Vec<&Entry>)> = vec![(String::new(), existence.clone())];
        for (i, f) in schema.fields.iter().enumerate() {
            let of_field: Vec<&Entry> = list
                .iter()
                .copied()
                .filter(|e| e.field.as_deref() == Some(&f.name))
                .collect();
            if !of_field.is_empty() {
                values[i] = newest(&of_field).new.clone();
                groups.push((f.name.clone(), of_field));
            }
        }
        for (field, group) in groups {
            if group.is_empty() {
                continue;
            }
            let w = newest(&group);
            for h in &group {
                let head = !group.iter().any(|x| x != h && saw(k, x, h));
                if !head {
                    continue;
                }
                let differs = if field.is_empty() {
                    h.op != w.op
                } else {
                    !equal(&h.new, &w.new)
                };
                if !std::ptr::eq(*h, w) && differs {
                    conflicts.insert((
                        table.clone(),
                        row.clone(),
                        field.clone(),
                        "concurrent".to_owned(),
                        h.device.clone(),
                        h.seq,
                    ));
                }
                if let Some(d) = delete
                    && !field.is_empty()
                    && h.op == Op::Update
                    && !saw(k, d, h)
                {
                    conflicts.insert((
                        table.clone(),
                        row.clone(),
                        field.clone(),
                        "deleted".to_owned(),
                        h.device.clone(),
                        h.seq,
                    ));
                }
            }
        }
        state.insert((table.clone(), row.clone()), (values, delete.is_some()));
    }
    // Rows with the same unique key: the smallest id stays live.
    let mut hidden: BTreeSet<(String, String)> = BTreeSet::new();
    for schema in tables::all() {
        let Some(key) = schema.unique_keys.iter().find(|k| k.as_slice() != [0]) else {
            continue;
        };
        let mut by_key: BTreeMap<Vec<String>, Vec<String>> = BTreeMap::new();
        for ((table, row), (values, deleted)) in &state {
            if *table != schema.name || *deleted {
                continue;
            }
            let k: Vec<String> = key
                .iter()
                .map(|i| match &values[*i] {
                    Value::Null => String::new(),
                    v => format!("{v:?}"),
                })
                .collect();
            by_key.entry(k).or_default().push(row.clone());
        }
        for (_, mut ids) in by_key {
            ids.sort();
            for id in ids.into_iter().skip(1) {
                conflicts.insert((
                    schema.name.clone(),
                    id.clone(),
                    String::new(),
                    "duplicate".to_owned(),
                    String::new(),
                    0,
                ));
                hidden.insert((schema.name.clone(), id));
            }
        }
    }
    let mut out: BTreeMap<String, Vec<Vec<Value>>> = BTreeMap::new();
    for schema in tables::all() {
        out.insert(schema.name.clone(), Vec::new());
    }
    for ((table, row), (mut values, deleted)) in state {
        let gone = deleted || hidden.contains(&(table.clone(), row.clone()));
        values.push(Value::Integer(i64::from(gone)));
        out.get_mut(&table).unwrap().push(values);
    }
    Expected {
        tables: out,
        conflicts,
    }
}

/// What a store holds, in the model's shape.
pub fn observed(store: &fieldcage_core::Store) -> Expected {
    let mut out = BTreeMap::new();
    for schema in tables::all() {
        let conn = store.raw();
        let mut stmt = conn
            .prepare(&format!("SELECT * FROM {} ORDER BY id", schema.name))
            .unwrap();
        let n = stmt.column_count();
        let rows: Vec<Vec<Value>> = stmt
            .query_map([], |r| (0..n).map(|i| r.get(i)).collect())
            .unwrap()
            .collect::<Result<_, _>>()
            .unwrap();
        out.insert(schema.name.clone(), rows);
    }
    let mut conflicts = BTreeSet::new();
    let conn = store.raw();
    let mut stmt = conn
        .prepare(
            "SELECT table_name, row_id, field, kind, other_device, other_seq FROM sync_conflict",
        )
        .unwrap();
    for c in stmt
        .query_map([], |r| {
            Ok((
                r.get(0)?,
                r.get(1)?,
                r.get(2)?,
                r.get(3)?,
                r.get(4)?,
                r.get(5)?,
            ))
        })
        .unwrap()
    {
        conflicts.insert(c.unwrap());
    }
    let conn = store.raw();
    let mut stmt = conn
        .prepare("SELECT table_name, row_id FROM sync_hidden")
        .unwrap();
    for h in stmt
        .query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?)))
        .unwrap()
    {
        let (t, r) = h.unwrap();
        conflicts.insert((t, r, String::new(), "duplicate".into(), String::new(), 0));
    }
    Expected {
        tables: out,
        conflicts,
    }
}

/// Every change-log entry of a store, in the model's shape.
pub fn logged(store: &fieldcage_core::Store) -> Vec<Entry> {
    fieldcage_core::store::log::all_entries(&store.raw())
        .unwrap()
        .into_iter()
        .map(|c| Entry {
            device: c.entry.device_id,
            seq: c.entry.seq,
            hlc: c.entry.hlc,
            table: c.table,
            row: c.row_id,
            op: c.entry.op,
            field: c.entry.field,
            old: c.entry.old_value,
            new: c.entry.new_value,
        })
        .collect()
}

/// The entries of the change-sets a store has applied, plus its own.
fn expected_log(store: &fieldcage_core::Store, all: &[Entry]) -> Vec<Entry> {
    let conn = store.raw();
    let ranges: Vec<(String, i64)> = conn
        .prepare("SELECT device_id, max(last_seq) FROM sync_applied GROUP BY device_id")
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    let mut v: Vec<Entry> = all
        .iter()
        .filter(|e| {
            e.device == store.device_id()
                || ranges
                    .iter()
                    .any(|(d, upto)| *d == e.device && e.seq <= *upto)
        })
        .cloned()
        .collect();
    v.sort_by(|a, b| (&a.device, a.seq).cmp(&(&b.device, b.seq)));
    v
}

/// Deliver the change-sets to a fresh device in the order given by `seed`,
/// with duplicate copies, syncing after random prefixes; check every state
/// against the model. Returns the final data snapshot.
pub fn replay(
    files: &[(PathBuf, Vec<u8>)],
    all: &[Entry],
    k: &Knowledge,
    seed: u64,
) -> Result<String, TestCaseError> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let tmp = fast_temp();
    let target = tmp.path("target");
    fs::create_dir_all(&target).unwrap();
    let mut observer = Device::empty(&tmp, "observer", SEASON_MILLIS);
    let mut arrivals: Vec<(usize, bool)> = (0..files.len()).map(|i| (i, false)).collect();
    for i in 0..files.len() {
        if rng.random_bool(0.3) {
            arrivals.push((i, true));
        }
    }
    arrivals.shuffle(&mut rng);
    for (n, (i, copy)) in arrivals.iter().enumerate() {
        let (path, bytes) = &files[*i];
        let device = path.parent().unwrap().file_name().unwrap();
        let dir = target.join(device);
        fs::create_dir_all(&dir).unwrap();
        let name = if *copy {
            format!(
                "copy {n} of {}",
                path.file_name().unwrap().to_string_lossy()
            )
        } else {
            path.file_name().unwrap().to_string_lossy().into_owned()
        };
        fs::write(dir.join(name), bytes).unwrap();
        if rng.random_bool(0.4) || n + 1 == arrivals.len() {
            let r = observer.sync(&target);
            prop_assert!(
                r.skipped.iter().all(|s| s.kind != sync::SkipKind::Rejected),
                "{}",
                r
            );
            check(&observer.store, all, k)?;
        }
    }
    let r = observer.sync(&target);
    prop_assert!(
        r.skipped
            .iter()
            .all(|s| s.kind == sync::SkipKind::Duplicate),
        "{}",
        r
    );
    let log = logged(&observer.store);
    prop_assert_eq!(log.len(), all.len(), "every entry is in the log");
    Ok(data_snapshot(&observer.store))
}

/// The store holds exactly the model of the entries it has applied.
fn check(store: &fieldcage_core::Store, all: &[Entry], k: &Knowledge) -> Result<(), TestCaseError> {
    let log = logged(store);
    let expected_log = expected_log(store, all);
    prop_assert!(log == expected_log, "the log holds whole change-sets only");
    let want = model(&log, k);
    let got = observed(store);
    prop_assert_eq!(&got.tables, &want.tables);
    prop_assert_eq!(&got.conflicts, &want.conflicts);
    Ok(())
}

fn cases() -> u32 {
    std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1000)
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: cases(),
        max_shrink_iters: 2000,
        ..ProptestConfig::default()
    })]

    #[test]
    fn any_order_of_change_sets_converges_to_the_model(
        n in 3usize..=4,
        steps in prop::collection::vec(step(), 4..40),
        seeds in prop::collection::vec(any::<u64>(), 2),
    ) {
        let mut s = Scenario::new(n);
        for st in &steps {
            s.run(st);
        }
        s.settle();
        // Every file as read, and what its header says its device knew.
        let files: Vec<(PathBuf, Vec<u8>)> =
            s.files().into_iter().map(|p| { let b = fs::read(&p).unwrap(); (p, b) }).collect();
        let mut all = Vec::new();
        for (path, bytes) in &files {
            let cs = changeset::decode(bytes).unwrap();
            for c in &cs.changes {
                let seen = s.knowledge.get(&(cs.device_id.clone(), c.seq)).cloned().unwrap_or_default();
                prop_assert_eq!(&seen, &cs.seen, "header of {}", path.display());
            }
            all.extend(entries_of(&cs));
        }
        all.sort_by(|a, b| (&a.device, a.seq).cmp(&(&b.device, b.seq)));
        // The devices themselves agree with each other and with the model.
        let first = data_snapshot(&s.devices[0].store);
        for d in &s.devices {
            prop_assert_eq!(&logged(&d.store), &all, "no entry missing from any log");
            prop_assert_eq!(&data_snapshot(&d.store), &first);
            let want = model(&all, &s.knowledge);
            let got = observed(&d.store);
            prop_assert_eq!(&got.tables, &want.tables);
            prop_assert_eq!(&got.conflicts, &want.conflicts);
        }
        for seed in seeds {
            let end = replay(&files, &all, &s.knowledge, seed)?;
            prop_assert_eq!(&end, &first, "every order ends in the same tables");
        }
    }
}

/// The model on its own: two edits that did not see each other give one
/// conflict; a third that saw both closes it.
#[test]
fn the_model_counts_one_conflict_per_concurrent_edit() {
    let e = |device: &str, seq: i64, hlc: i64, v: i64| Entry {
        device: device.into(),
        seq,
        hlc,
        table: "census".into(),
        row: "r".into(),
        op: Op::Update,
        field: Some("alive".into()),
        old: Value::Null,
        new: Value::Integer(v),
    };
    let mut k = Knowledge::new();
    let entries = vec![e("a", 1, 10, 1), e("b", 1, 20, 2)];
    // Check value: design rule (docs/methods.md §10.1), not a published number.
    assert_eq!(model(&entries, &k).conflicts.len(), 1);
    k.insert(
        ("c".into(), 1),
        BTreeMap::from([("a".into(), 1), ("b".into(), 1)]),
    );
    let mut more = entries.clone();
    more.push(e("c", 1, 30, 3));
    let m = model(&more, &k);
    assert!(m.conflicts.is_empty(), "{:?}", m.conflicts);
    // Column 3 of census is alive.
    assert_eq!(m.tables["census"][0][3], Value::Integer(3));
}
