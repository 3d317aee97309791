//! Exhaustive order test (issue 6 acceptance): 7 change-sets from 4 devices,
//! holding a concurrent edit, a duplicate unique key, an edit against a
//! delete, a restore and a conflict settled by a later edit, are delivered in
//! all 7! = 5 040 orders to fresh databases through the library's apply path
//! ([`sync::apply_changeset`], the one `fieldcage sync` uses); every order
//! must end in the same tables, the same conflicts and the same log.
//!
//! Each fresh database is a copy of a migrated template made with SQLite's
//! backup API on a RAM disk; the orders are shared between two threads.

use std::collections::BTreeSet;
use std::fs;

use fieldcage_core::model::*;
use fieldcage_core::sync::changeset::{self, ChangeSet};
use fieldcage_core::sync::{self, ApplyResult, ConflictChoice, SyncOptions};
use fieldcage_core::tables;

use crate::util::{Device, SEASON_MILLIS, Temp, Tiny, data_snapshot, fast_temp, fixed_id};

const HOUR: i64 = 3_600_000;

fn census(n: u64, visit: usize, alive: i64) -> Census {
    Census {
        id: CensusId(fixed_id(n)),
        visit_id: Tiny::visits()[visit],
        taxon_id: Tiny::taxa()[0],
        alive: Some(alive),
        dead: None,
        missing: None,
        notes: None,
    }
}

fn notes<R: fieldcage_core::store::Record + Clone>(
    d: &mut Device,
    id: uuid::Uuid,
    set: impl Fn(&mut R),
) {
    let mut r: R = d.store.get(id).unwrap().unwrap();
    set(&mut r);
    d.clock.advance(HOUR);
    d.store.write(|w| w.update(&r)).unwrap();
}

/// The seven change-sets, and the state a device reaches with all of them.
fn scenario(tmp: &Temp) -> (Vec<ChangeSet>, String, usize) {
    let target = tmp.path("target");
    fs::create_dir_all(&target).unwrap();
    let [a, b, c, d] = ["a", "b", "c", "d"].map(|n| Device::tiny(tmp, n, SEASON_MILLIS));
    let (mut a, mut b, mut c, mut d) = (a, b, c, d);
    let z = CensusId(fixed_id(102));
    let [t0, _] = Tiny::treatments();
    let [c0, c1] = Tiny::cages();
    // A1: two censuses and a cage note.
    a.store
        .write(|w| {
            w.insert(&census(100, 0, 5))?;
            w.insert(&census(102, 1, 3))
        })
        .unwrap();
    notes::<Enclosure>(&mut a, c0.uuid(), |e| e.notes = Some("a".into()));
    a.sync(&target);
    // B1: a census with the same visit and taxon (a duplicate key), a
    // treatment note; B applies A1 after writing.
    b.store.write(|w| w.insert(&census(101, 0, 6))).unwrap();
    notes::<Treatment>(&mut b, t0.uuid(), |t| t.notes = Some("b".into()));
    b.sync(&target);
    // C1: the same treatment note, concurrently; C applies A1 and B1.
    notes::<Treatment>(&mut c, t0.uuid(), |t| t.notes = Some("c".into()));
    notes::<Enclosure>(&mut c, c1.uuid(), |e| e.notes = Some("c".into()));
    c.sync(&target);
    // B2: an edit of A's second census, made after seeing it.
    notes::<Census>(&mut b, z.uuid(), |k| k.alive = Some(4));
    b.sync(&target);
    // A2: A deletes its census without having seen B2 (edit against delete).
    let schema = tables::get("census").unwrap();
    a.clock.advance(HOUR);
    a.store.write(|w| w.delete(schema, &z.to_string())).unwrap();
    notes::<Enclosure>(&mut a, c0.uuid(), |e| e.notes = Some("a again".into()));
    a.sync(&target);
    // D1: D's setup; D then applies everything and, D2: settles the
    // treatment note by editing it and restores the census.
    d.sync(&target);
    notes::<Treatment>(&mut d, t0.uuid(), |t| t.notes = Some("d".into()));
    let deleted = sync::conflicts(&d.store)
        .unwrap()
        .into_iter()
        .find(|k| k.kind == sync::ConflictKind::Deleted)
        .expect("D sees the edit against the delete");
    sync::resolve_conflict(&mut d.store, &deleted.key, ConflictChoice::TakeOther).unwrap();
    d.sync(&target);
    for dev in [&mut a, &mut b, &mut c, &mut d] {
        dev.sync(&target);
    }
    let mut sets = Vec::new();
    for dir in fs::read_dir(&target).unwrap() {
        for f in fs::read_dir(dir.unwrap().path()).unwrap() {
            sets.push(changeset::read(&f.unwrap().path()).unwrap());
        }
    }
    sets.sort_by(|p, q| (&p.device_id, p.first_seq).cmp(&(&q.device_id, q.first_seq)));
    assert_eq!(sets.len(), 7, "7 change-sets from 4 devices");
    let open = sync::conflicts(&a.store).unwrap().len();
    (sets, data_snapshot(&a.store), open)
}

/// All permutations of 0..n, in lexicographic order (Heap-free, simple).
fn permutations(n: usize) -> Vec<Vec<usize>> {
    let mut out = Vec::new();
    let mut p: Vec<usize> = (0..n).collect();
    loop {
        out.push(p.clone());
        // Next lexicographic permutation (Knuth, TAOCP 7.2.1.2, algorithm L;
        // common practice).
        let Some(i) = (0..n - 1).rev().find(|&i| p[i] < p[i + 1]) else {
            break;
        };
        let j = (i + 1..n).rev().find(|&j| p[i] < p[j]).unwrap();
        p.swap(i, j);
        p[i + 1..].reverse();
    }
    out
}

/// Deliver the change-sets in `order` to a fresh database, applying whatever
/// is ready after each arrival. Returns the final data snapshot, the
/// conflicts and the number of log entries.
fn deliver(
    tmp: &Temp,
    n: usize,
    sets: &[ChangeSet],
    order: &[usize],
) -> (String, BTreeSet<String>, i64) {
    let mut dev = Device::empty(tmp, &format!("o{n}"), SEASON_MILLIS);
    let options = SyncOptions::default();
    let mut pending: Vec<usize> = Vec::new();
    for &i in order {
        pending.push(i);
        loop {
            let mut progress = false;
            let mut still = Vec::new();
            for &k in &pending {
                match sync::apply_changeset(
                    &mut dev.store,
                    &sets[k],
                    &sets[k].file_name(),
                    0,
                    &options,
                )
                .unwrap()
                {
                    ApplyResult::Applied { .. } => progress = true,
                    ApplyResult::Waiting(_) => still.push(k),
                    ApplyResult::AlreadyApplied { .. } => panic!("applied twice"),
                }
            }
            pending = still;
            if !progress {
                break;
            }
        }
    }
    assert!(
        pending.is_empty(),
        "everything applies in the end: {order:?}"
    );
    let conflicts = sync::conflicts(&dev.store)
        .unwrap()
        .into_iter()
        .map(|c| c.key)
        .collect();
    let log = dev.store.change_count().unwrap();
    let path = dev.store.path().to_path_buf();
    let snapshot = data_snapshot(&dev.store);
    drop(dev);
    for suffix in ["", "-wal", "-shm"] {
        let mut p = path.clone().into_os_string();
        p.push(suffix);
        let _ = fs::remove_file(p);
    }
    (snapshot, conflicts, log)
}

#[test]
fn all_5040_orders_of_seven_change_sets_converge() {
    let tmp = fast_temp();
    let (sets, reference, open) = scenario(&tmp);
    // The scenario holds what it is meant to: a hidden duplicate and the
    // concurrent notes settled by D; D restored the census.
    assert_eq!(open, 1, "one duplicate census stays open for review");
    let total: usize = sets.iter().map(|s| s.changes.len()).sum();
    let orders = permutations(sets.len());
    assert_eq!(orders.len(), 5040);
    let (first, first_conflicts, _) = deliver(&tmp, 0, &sets, &orders[0]);
    assert_eq!(
        first, reference,
        "a fresh device ends where the four devices are"
    );
    let chunks: Vec<&[Vec<usize>]> = orders.chunks(orders.len().div_ceil(2)).collect();
    std::thread::scope(|scope| {
        let handles: Vec<_> = chunks
            .iter()
            .enumerate()
            .map(|(t, chunk)| {
                let (tmp, sets, first, first_conflicts) = (&tmp, &sets, &first, &first_conflicts);
                scope.spawn(move || {
                    for (k, order) in chunk.iter().enumerate() {
                        let (snap, conflicts, log) = deliver(tmp, 1 + t * 10_000 + k, sets, order);
                        assert_eq!(&snap, first, "order {order:?}");
                        assert_eq!(&conflicts, first_conflicts, "order {order:?}");
                        assert_eq!(log as usize, total, "every entry logged, order {order:?}");
                    }
                })
            })
            .collect();
        for h in handles {
            h.join().unwrap();
        }
    });
}
