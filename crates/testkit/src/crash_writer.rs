//! The writer side of the crash test (`tests/crash.rs`): a process that saves
//! field records through the operation set ([`Service::call`], as the tablet
//! UI does) until it is killed, and keeps a side file of what it was told is
//! saved. The test kills it with SIGKILL at random points, reopens the
//! database and checks that every acknowledged save is there.
//!
//! It runs as `fieldcage-crash-writer --db DB --log FILE
//! --seed N`. Each save is a census (animals alive) or a percent cover of one
//! cage, taxon and day, drawn from a small set so that later saves also
//! change earlier rows. For each save the side file gets two lines, each
//! written with one `write` call and flushed to disk before going on:
//!
//! ```text
//! try <n> <census|cover> <cage id> <date> <taxon id> <value>
//! ack <n> <record id>
//! ```
//!
//! The `try` line is written before the call, the `ack` line only after the
//! call has returned, that is after the transaction has committed
//! (synchronous=FULL). So an `ack` line in the file implies the save was
//! committed first: "acknowledged ⇒ present" is the claim the test checks. The
//! converse need not hold: a save committed just before the kill may have no
//! `ack` (the UI never showed it as saved); the `try` line tells the test
//! which save that can be.

use std::fs::{File, OpenOptions};
use std::io::{self, Write};
use std::path::Path;

use chrono::NaiveDate;
use rand::{Rng, SeedableRng};
use serde_json::json;

use fieldcage_core::model::{Enclosure, Experiment, Role, Taxon};
use fieldcage_core::{Error, Result, Store};
use fieldcage_ops::Service;

/// Days from the experiment's start on which the writer saves.
pub const DAYS: i64 = 4;

/// What a save records.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum SaveKind {
    /// `save_census`: animals found alive.
    Census,
    /// `save_cover`: percent cover of a plant.
    Cover,
}

impl SaveKind {
    /// The word in the side file.
    pub fn as_str(self) -> &'static str {
        match self {
            SaveKind::Census => "census",
            SaveKind::Cover => "cover",
        }
    }
}

/// Which row a save writes: one per kind, cage, day and taxon.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct SaveKey {
    /// Census or cover.
    pub kind: SaveKind,
    /// The cage (enclosure id).
    pub cage: String,
    /// The field day.
    pub date: NaiveDate,
    /// The taxon id.
    pub taxon: String,
}

/// One line of the side file.
#[derive(Debug, Clone, PartialEq)]
pub enum LogLine {
    /// Save number `n` is about to be made.
    Try {
        /// Save number, from 1 in each run of the writer.
        n: u64,
        /// The row.
        key: SaveKey,
        /// Animals alive (census) or percent cover.
        value: f64,
    },
    /// Save number `n` returned: it is committed, as record `id`.
    Ack {
        /// Save number.
        n: u64,
        /// The saved record's id.
        id: String,
    },
}

/// Save until killed (or until `max_saves` saves when given), logging to
/// `log` as the module documentation says. Prints `ready` on standard output
/// once the database is open.
pub fn run(db: &Path, log: &Path, seed: u64, max_saves: Option<u64>) -> Result<()> {
    let store = Store::open(db)?;
    let experiment = store
        .list::<Experiment>()?
        .into_iter()
        .next()
        .ok_or_else(|| Error::State(format!("{}: holds no experiment", db.display())))?;
    let cages: Vec<String> = store
        .list::<Enclosure>()?
        .into_iter()
        .map(|c| c.id.0.to_string())
        .collect();
    let taxa = store.list::<Taxon>()?;
    let of_role = |plant: bool| -> Vec<String> {
        taxa.iter()
            .filter(|t| (t.role == Role::Plant) == plant)
            .map(|t| t.id.0.to_string())
            .collect()
    };
    let (plants, animals) = (of_role(true), of_role(false));
    if cages.is_empty() || plants.is_empty() || animals.is_empty() {
        return Err(Error::State(
            "the crash writer needs cages, plants and animals".into(),
        ));
    }
    let service = Service::new(store);
    let mut file = OpenOptions::new()
        .create(true)
        .append(true)
        .open(log)
        .map_err(|e| Error::io(log, e))?;
    println!("ready");
    io::stdout()
        .flush()
        .map_err(|e| Error::io("standard output", e))?;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut n = 0;
    while max_saves.is_none_or(|max| n < max) {
        n += 1;
        let kind = if rng.random_bool(0.5) {
            SaveKind::Census
        } else {
            SaveKind::Cover
        };
        let cage = cages[rng.random_range(0..cages.len())].clone();
        let date = experiment.start_date + chrono::Duration::days(rng.random_range(0..DAYS));
        let (taxon, value, args) = match kind {
            SaveKind::Census => {
                let taxon = animals[rng.random_range(0..animals.len())].clone();
                let alive: i64 = rng.random_range(0..=20);
                let args = json!({ "enclosure_id": cage, "taxon_id": taxon, "alive": alive,
                                   "date": date, "observer": "crash writer" });
                (taxon, alive as f64, args)
            }
            SaveKind::Cover => {
                let taxon = plants[rng.random_range(0..plants.len())].clone();
                // Halves are exact in binary: the stored value compares equal.
                let percent = f64::from(rng.random_range(0..=200u32)) / 2.0;
                let args = json!({ "enclosure_id": cage, "taxon_id": taxon, "percent": percent,
                                   "date": date, "observer": "crash writer" });
                (taxon, percent, args)
            }
        };
        let key = SaveKey {
            kind,
            cage,
            date,
            taxon,
        };
        append(
            &mut file,
            log,
            &format_line(&LogLine::Try { n, key, value }),
        )?;
        let op = match kind {
            SaveKind::Census => "save_census",
            SaveKind::Cover => "save_cover",
        };
        let saved = service
            .call(op, args)
            .map_err(|p| Error::State(format!("{op} failed: {}", p.message)))?;
        let id = saved["record"]["id"]
            .as_str()
            .ok_or_else(|| Error::State(format!("{op} returned no record id: {saved}")))?
            .to_owned();
        append(&mut file, log, &format_line(&LogLine::Ack { n, id }))?;
    }
    Ok(())
}

/// Append one line with one `write` call and flush it to disk.
fn append(file: &mut File, path: &Path, line: &str) -> Result<()> {
    file.write_all(line.as_bytes())
        .and_then(|()| file.sync_data())
        .map_err(|e| Error::io(path, e))
}

/// A side-file line, with its line break.
pub fn format_line(line: &LogLine) -> String {
    match line {
        LogLine::Try { n, key, value } => format!(
            "try {n} {} {} {} {} {value}\n",
            key.kind.as_str(),
            key.cage,
            key.date,
            key.taxon
        ),
        LogLine::Ack { n, id } => format!("ack {n} {id}\n"),
    }
}

/// The lines of a side file. A last line without its line break was cut by
/// the kill and is left out (an `ack` counts only when whole).
pub fn read_log(path: &Path) -> Result<Vec<LogLine>> {
    let text = match std::fs::read_to_string(path) {
        Ok(text) => text,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(Vec::new()),
        Err(e) => return Err(Error::io(path, e)),
    };
    let whole = match text.rfind('\n') {
        Some(end) => &text[..end],
        None => "",
    };
    whole
        .lines()
        .enumerate()
        .map(|(i, line)| {
            parse_line(line).ok_or_else(|| {
                Error::State(format!(
                    "{}:{}: not a crash-writer line: {line:?}",
                    path.display(),
                    i + 1
                ))
            })
        })
        .collect()
}

fn parse_line(line: &str) -> Option<LogLine> {
    let words: Vec<&str> = line.split(' ').collect();
    match words.as_slice() {
        ["try", n, kind, cage, date, taxon, value] => Some(LogLine::Try {
            n: n.parse().ok()?,
            key: SaveKey {
                kind: match *kind {
                    "census" => SaveKind::Census,
                    "cover" => SaveKind::Cover,
                    _ => return None,
                },
                cage: (*cage).to_owned(),
                date: date.parse().ok()?,
                taxon: (*taxon).to_owned(),
            },
            value: value.parse().ok()?,
        }),
        ["ack", n, id] => Some(LogLine::Ack {
            n: n.parse().ok()?,
            id: (*id).to_owned(),
        }),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_side_file_line_reads_back_and_a_cut_line_is_left_out() {
        let key = SaveKey {
            kind: SaveKind::Cover,
            cage: "0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b".into(),
            date: NaiveDate::from_ymd_opt(2026, 5, 12).unwrap(),
            taxon: "0190a1b2-c3d4-7e5f-8a6b-000000000001".into(),
        };
        let tried = LogLine::Try {
            n: 7,
            key,
            value: 12.5,
        };
        let acked = LogLine::Ack {
            n: 7,
            id: "0190a1b2-c3d4-7e5f-8a6b-000000000002".into(),
        };
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("log");
        let text = format!(
            "{}{}ack 8 cut-by-the-k",
            format_line(&tried),
            format_line(&acked)
        );
        std::fs::write(&path, text).unwrap();
        assert_eq!(read_log(&path).unwrap(), vec![tried, acked]);
    }
}
