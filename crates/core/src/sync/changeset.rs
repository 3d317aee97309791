//! The change-set file: `schemas/changeset.json` defines it (the rows' Table
//! Schema, and under `fieldcageFile` the header line, the trailer and the
//! rules). This module writes the bytes and reads them back, verifying the
//! whole file before anything of it is used: the SHA-256 trailer first, then
//! the header, then every row against its table's schema.

use std::collections::BTreeMap;
use std::fs::File;
use std::io::Read;
use std::path::Path;
use std::sync::OnceLock;

use rusqlite::types::Value;
use sha2::{Digest, Sha256};
use uuid::Uuid;

use crate::disk::{self, Disk, Existing};
use crate::store::{Op, typed_text};
use crate::tables::{self, display_value};
use crate::{Error, Result};

/// The format definition, as shipped.
pub const SCHEMA_JSON: &str = include_str!("../../../../schemas/changeset.json");

/// First cell of every change-set's header line.
pub const MAGIC: &str = "fieldcage-changeset";

/// Largest change-set file read (512 MiB), so that a wrong file cannot
/// exhaust a tablet's memory.
pub const MAX_FILE_BYTES: u64 = 512 * 1024 * 1024;

/// The parts of `schemas/changeset.json` the code follows.
#[derive(Debug)]
struct Format {
    version: i64,
    columns: Vec<String>,
}

fn format() -> &'static Format {
    static FORMAT: OnceLock<Format> = OnceLock::new();
    FORMAT.get_or_init(|| {
        // The file is part of the build; tests catch a broken one.
        let json: serde_json::Value =
            serde_json::from_str(SCHEMA_JSON).expect("schemas/changeset.json is JSON");
        let columns = json["fields"]
            .as_array()
            .expect("changeset.json has fields")
            .iter()
            .map(|f| f["name"].as_str().expect("field name").to_owned())
            .collect();
        let version = json["fieldcageFile"]["version"]
            .as_i64()
            .expect("changeset.json has fieldcageFile.version");
        Format { version, columns }
    })
}

/// The format version this build writes and reads.
pub fn format_version() -> i64 {
    format().version
}

/// One change-log entry in a change-set.
#[derive(Debug, Clone, PartialEq)]
pub struct Change {
    /// Sequence number on its device.
    pub seq: i64,
    /// Hybrid-logical-clock timestamp.
    pub hlc: i64,
    /// Data table (its name in [`tables::all`]).
    pub table: &'static str,
    /// Row id.
    pub row_id: String,
    /// What it did.
    pub op: Op,
    /// Column (none for delete and restore; its name in the table's schema).
    pub field: Option<&'static str>,
    /// Value before.
    pub old_value: Value,
    /// Value after.
    pub new_value: Value,
}

/// A verified change-set: consecutive entries of one device.
#[derive(Debug, Clone, PartialEq)]
pub struct ChangeSet {
    /// The device that made the entries.
    pub device_id: String,
    /// Its human name when it wrote the file.
    pub device_name: String,
    /// First sequence number.
    pub first_seq: i64,
    /// Last sequence number.
    pub last_seq: i64,
    /// What the device had applied of each other device when it made these
    /// entries (device id → last seq).
    pub seen: BTreeMap<String, i64>,
    /// The entries, `first_seq..=last_seq` in order.
    pub changes: Vec<Change>,
    /// SHA-256 of the file before its trailer, lowercase hex.
    pub sha256: String,
    /// The experiment its device held when it wrote the file (none for a
    /// device that had none yet, and in files written before it was kept).
    pub experiment: Option<Experiment>,
}

/// Which experiment a change-set belongs to, as its header says it: the
/// experiment row's id (made from the experiment's code), its code and its
/// randomisation seed. A receiver that holds another experiment, or this
/// experiment randomised with another seed, refuses the file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Experiment {
    /// The experiment row's id.
    pub id: String,
    /// Its code (from the definition).
    pub code: String,
    /// Its randomisation seed.
    pub seed: Option<i64>,
}

impl ChangeSet {
    /// The file name this change-set has in its device's folder.
    pub fn file_name(&self) -> String {
        file_name(self.first_seq)
    }
}

/// The file name of a change-set starting at `first_seq`.
pub fn file_name(first_seq: i64) -> String {
    format!("{first_seq}.csv")
}

/// The first seq a canonical file name stands for (`57.csv` → 57).
pub fn seq_of_file_name(name: &str) -> Option<i64> {
    let digits = name.strip_suffix(".csv")?;
    if digits.is_empty() || !digits.bytes().all(|b| b.is_ascii_digit()) || digits.starts_with('0') {
        return None;
    }
    digits.parse().ok()
}

/// Lowercase hex SHA-256.
pub fn sha256_hex(bytes: &[u8]) -> String {
    let digest = Sha256::digest(bytes);
    let mut s = String::with_capacity(64);
    for b in digest.iter() {
        s.push_str(&format!("{b:02x}"));
    }
    s
}

/// The bytes of a change-set file. `changes` must be the device's entries
/// `first..=last` in order. Returns the bytes and their SHA-256.
pub fn encode(
    device_id: &str,
    device_name: &str,
    seen: &BTreeMap<String, i64>,
    changes: &[Change],
) -> Result<(Vec<u8>, String)> {
    encode_for(None, device_id, device_name, seen, changes)
}

/// [`encode`] with the experiment the file belongs to in its header.
pub fn encode_for(
    experiment: Option<&Experiment>,
    device_id: &str,
    device_name: &str,
    seen: &BTreeMap<String, i64>,
    changes: &[Change],
) -> Result<(Vec<u8>, String)> {
    let (Some(first), Some(last)) = (changes.first(), changes.last()) else {
        return Err(Error::Invariant(
            "a change-set needs at least one entry".into(),
        ));
    };
    let seen_text: Vec<String> = seen.iter().map(|(d, s)| format!("{d}:{s}")).collect();
    let mut w = csv::WriterBuilder::new()
        .flexible(true)
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    let csv_err = |e: csv::Error| Error::Invariant(format!("writing a change-set: {e}"));
    let mut header = vec![
        MAGIC.to_owned(),
        format!("version={}", format_version()),
        format!("device={device_id}"),
        format!("seq={}-{}", first.seq, last.seq),
        format!("rows={}", changes.len()),
        format!("seen={}", seen_text.join(" ")),
        format!("name={device_name}"),
    ];
    if let Some(e) = experiment {
        header.push(format!("experiment={}", e.id));
        header.push(format!("experiment_code={}", e.code));
        if let Some(seed) = e.seed {
            header.push(format!("seed={seed}"));
        }
    }
    w.write_record(&header).map_err(csv_err)?;
    w.write_record(&format().columns).map_err(csv_err)?;
    for c in changes {
        w.write_record([
            c.seq.to_string(),
            c.hlc.to_string(),
            c.table.to_owned(),
            c.row_id.clone(),
            c.op.as_str().to_owned(),
            c.field.unwrap_or_default().to_owned(),
            typed_text::encode(&c.old_value),
            typed_text::encode(&c.new_value),
        ])
        .map_err(csv_err)?;
    }
    let mut bytes = w
        .into_inner()
        .map_err(|e| Error::Invariant(format!("writing a change-set: {e}")))?;
    let hash = sha256_hex(&bytes);
    bytes.extend_from_slice(format!("sha256,{hash}\n").as_bytes());
    Ok((bytes, hash))
}

/// Read and verify a change-set file. Every problem is an
/// [`Error::ChangeSet`] naming the file (and the line where one applies).
pub fn read(path: &Path) -> Result<ChangeSet> {
    let bytes = read_bounded(path)?;
    decode(&bytes).map_err(|reason| Error::ChangeSet {
        file: path.to_path_buf(),
        reason,
    })
}

/// The bytes of a file, refused when larger than [`MAX_FILE_BYTES`].
pub fn read_bounded(path: &Path) -> Result<Vec<u8>> {
    let file = File::open(path).map_err(|e| Error::io(path, e))?;
    let mut bytes = Vec::new();
    file.take(MAX_FILE_BYTES + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| Error::io(path, e))?;
    if bytes.len() as u64 > MAX_FILE_BYTES {
        return Err(Error::ChangeSet {
            file: path.to_path_buf(),
            reason: format!(
                "is larger than a change-set may be ({} MiB)",
                MAX_FILE_BYTES / (1024 * 1024)
            ),
        });
    }
    Ok(bytes)
}

/// The content hash of change-set bytes whose trailer matches them (what
/// [`ChangeSet::sha256`] holds once they are read), without parsing the rows.
pub fn content_hash(bytes: &[u8]) -> Result<String, String> {
    verify_trailer(bytes).map(|(_, sha)| sha)
}

/// Verify and parse change-set bytes; the error says what is wrong.
pub fn decode(bytes: &[u8]) -> Result<ChangeSet, String> {
    let (body, sha256) = verify_trailer(bytes)?;
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(body);
    let mut records = reader.records();
    let header = records
        .next()
        .ok_or("is empty")?
        .map_err(|e| format!("line 1: {e}"))?;
    let head = parse_header(&header)?;
    let columns = records
        .next()
        .ok_or("line 2: the column names are missing")?
        .map_err(|e| format!("line 2: {e}"))?;
    if columns.iter().collect::<Vec<_>>() != format().columns {
        return Err(format!(
            "line 2: the columns are not {}",
            format().columns.join(",")
        ));
    }
    let mut changes: Vec<Change> = Vec::with_capacity(head.rows as usize);
    // The fields of the insert run the last entry belongs to.
    let mut run: Vec<&'static str> = Vec::new();
    for (n, record) in records.enumerate() {
        let record = record.map_err(|e| format!("line {}: {e}", n + 3))?;
        let line = record.position().map_or(n as u64 + 3, |p| p.line());
        let expected = head.first + n as i64;
        let change = parse_row(&record, expected).map_err(|e| format!("line {line}: {e}"))?;
        continue_run(&mut run, changes.last(), &change).map_err(|e| format!("line {line}: {e}"))?;
        changes.push(change);
    }
    if changes.len() as i64 != head.rows {
        return Err(format!(
            "the header says {} rows but the file holds {}",
            head.rows,
            changes.len()
        ));
    }
    Ok(ChangeSet {
        device_id: head.device,
        device_name: head.name,
        first_seq: head.first,
        last_seq: head.last,
        seen: head.seen,
        changes,
        sha256,
        experiment: head.experiment,
    })
}

/// An insert is a run of entries: the row's `id` entry, then at most one
/// entry per other field of the same row, with nothing between them (how the
/// writer logs it; the change log stores each run as one packed entry, see
/// [`crate::store::log`]). `run` holds the fields of the run `last` belongs
/// to (the schema's own strings, as every [`Change`] names them).
fn continue_run(
    run: &mut Vec<&'static str>,
    last: Option<&Change>,
    c: &Change,
) -> Result<(), String> {
    let field = c.field.unwrap_or_default();
    if c.op != Op::Insert {
        run.clear();
        return Ok(());
    }
    if field == "id" {
        run.clear();
        run.push(field);
        return Ok(());
    }
    let same_row = last.is_some_and(|l| {
        l.op == Op::Insert && l.table == c.table && l.row_id == c.row_id && !run.is_empty()
    });
    if !same_row {
        return Err(format!(
            "the insert entry of {}.{field} for row {} does not follow that row's id entry \
             (an insert is its id entry, then its other fields)",
            c.table, c.row_id
        ));
    }
    if run.contains(&field) {
        return Err(format!(
            "{}.{field}: given twice in one insert of row {}",
            c.table, c.row_id
        ));
    }
    run.push(field);
    Ok(())
}

/// Check the trailer; the bytes it covers and their SHA-256.
fn verify_trailer(bytes: &[u8]) -> Result<(&[u8], String), String> {
    let Some(without_end) = bytes.strip_suffix(b"\n") else {
        return Err("does not end with a line break: it is truncated".to_owned());
    };
    let start = without_end
        .iter()
        .rposition(|b| *b == b'\n')
        .map_or(0, |i| i + 1);
    let trailer = &without_end[start..];
    let Some(hex) = trailer.strip_prefix(b"sha256,") else {
        return Err(
            "has no sha256 trailer line at its end: it is truncated or not a change-set".to_owned(),
        );
    };
    let body = &bytes[..start];
    let actual = sha256_hex(body);
    if hex != actual.as_bytes() {
        return Err(format!(
            "its content does not match its sha256 trailer (content hashes to {actual}): the file is damaged or incomplete"
        ));
    }
    Ok((body, actual))
}

struct Header {
    device: String,
    name: String,
    first: i64,
    last: i64,
    rows: i64,
    seen: BTreeMap<String, i64>,
    experiment: Option<Experiment>,
}

fn parse_header(record: &csv::StringRecord) -> Result<Header, String> {
    if record.get(0) != Some(MAGIC) {
        return Err(format!(
            "line 1: is not a fieldcage change-set (it does not start with {MAGIC})"
        ));
    }
    let mut fields: BTreeMap<&str, &str> = BTreeMap::new();
    for cell in record.iter().skip(1) {
        let (k, v) = cell
            .split_once('=')
            .ok_or_else(|| format!("line 1: {cell:?} is not key=value"))?;
        if fields.insert(k, v).is_some() {
            return Err(format!("line 1: {k} is given twice"));
        }
    }
    let get = |k: &str| {
        fields
            .get(k)
            .copied()
            .ok_or_else(|| format!("line 1: {k}= is missing"))
    };
    let version: i64 = get("version")?
        .parse()
        .map_err(|_| "line 1: version is not a number".to_owned())?;
    if version != format_version() {
        return Err(format!(
            "line 1: is format version {version}; this fieldcage reads version {} (update fieldcage to read newer files)",
            format_version()
        ));
    }
    let device = get("device")?;
    if Uuid::parse_str(device).is_err() {
        return Err(format!("line 1: device {device:?} is not a device id"));
    }
    let (first, last) = get("seq")?
        .split_once('-')
        .and_then(|(a, b)| Some((a.parse::<i64>().ok()?, b.parse::<i64>().ok()?)))
        .filter(|(a, b)| *a >= 1 && b >= a)
        .ok_or_else(|| {
            "line 1: seq= is not a range first-last with 1 <= first <= last".to_owned()
        })?;
    let rows: i64 = get("rows")?
        .parse()
        .map_err(|_| "line 1: rows= is not a number".to_owned())?;
    if rows != last - first + 1 {
        return Err(format!(
            "line 1: rows={rows} does not fit the range {first}-{last}"
        ));
    }
    let mut seen = BTreeMap::new();
    for pair in get("seen")?.split(' ').filter(|p| !p.is_empty()) {
        let (d, s) = pair
            .split_once(':')
            .and_then(|(d, s)| Some((d, s.parse::<i64>().ok()?)))
            .filter(|(d, s)| Uuid::parse_str(d).is_ok() && *s >= 0)
            .ok_or_else(|| format!("line 1: seen entry {pair:?} is not <device id>:<seq>"))?;
        if d == device {
            return Err("line 1: seen names the file's own device".to_owned());
        }
        seen.insert(d.to_owned(), s);
    }
    let name = get("name")?;
    if name.chars().count() > 200 || name.chars().any(char::is_control) {
        return Err("line 1: name= is not a device name".to_owned());
    }
    let experiment = match fields.get("experiment") {
        None => None,
        Some(id) => {
            if Uuid::parse_str(id).is_err() {
                return Err(format!("line 1: experiment {id:?} is not an experiment id"));
            }
            let code = get("experiment_code")?;
            if code.is_empty() || code.chars().count() > 200 || code.chars().any(char::is_control) {
                return Err("line 1: experiment_code= is not an experiment code".to_owned());
            }
            let seed = match fields.get("seed") {
                None => None,
                Some(s) => Some(
                    s.parse::<i64>()
                        .map_err(|_| "line 1: seed= is not a number".to_owned())?,
                ),
            };
            Some(Experiment {
                id: (*id).to_owned(),
                code: code.to_owned(),
                seed,
            })
        }
    };
    Ok(Header {
        device: device.to_owned(),
        name: name.to_owned(),
        first,
        last,
        rows,
        seen,
        experiment,
    })
}

fn parse_row(record: &csv::StringRecord, expected_seq: i64) -> Result<Change, String> {
    let columns = &format().columns;
    if record.len() != columns.len() {
        return Err(format!(
            "has {} values, expected {}",
            record.len(),
            columns.len()
        ));
    }
    let cell = |i: usize| record.get(i).unwrap_or_default();
    let seq: i64 = cell(0)
        .parse()
        .map_err(|_| format!("seq: {:?} is not a whole number", cell(0)))?;
    if seq != expected_seq {
        return Err(format!("seq: is {seq}, expected {expected_seq}"));
    }
    let hlc: i64 = cell(1)
        .parse()
        .ok()
        .filter(|h| *h >= 0)
        .ok_or_else(|| format!("hlc: {:?} is not a clock value", cell(1)))?;
    let table = cell(2);
    let schema =
        tables::get(table).ok_or_else(|| format!("table_name: {table:?} is not a table"))?;
    let row_id = cell(3);
    if Uuid::parse_str(row_id).is_err() || row_id.len() != 36 {
        return Err(format!("row_id: {row_id:?} is not a UUID"));
    }
    let op = Op::parse(cell(4)).ok_or_else(|| format!("op: {:?} is not an operation", cell(4)))?;
    let field = cell(5);
    let old_value =
        typed_text::decode(cell(6)).map_err(|e| format!("old_value: {:?} {e}", cell(6)))?;
    let new_value =
        typed_text::decode(cell(7)).map_err(|e| format!("new_value: {:?} {e}", cell(7)))?;
    let mut column = None;
    if op.is_existence() {
        if !field.is_empty() || old_value != Value::Null || new_value != Value::Null {
            return Err(format!("a {} has no field and no values", op.as_str()));
        }
    } else {
        let f = schema
            .field(field)
            .ok_or_else(|| format!("field: {field:?} is not a column of {table}"))?;
        column = Some(f.name.as_str());
        if op == Op::Update && field == "id" {
            return Err("field: an update cannot change the id".to_owned());
        }
        if new_value == Value::Null && op == Op::Insert {
            return Err(format!("{table}.{field}: an insert entry has no value"));
        }
        f.check(&new_value).map_err(|reason| {
            format!(
                "{table}.{field}: {reason} (value: {:?})",
                display_value(&new_value)
            )
        })?;
        if field == "id" && new_value != Value::Text(row_id.to_owned()) {
            return Err("id: the inserted id is not the row_id".to_owned());
        }
    }
    Ok(Change {
        seq,
        hlc,
        table: schema.name.as_str(),
        row_id: row_id.to_owned(),
        op,
        field: column,
        old_value,
        new_value,
    })
}

/// Write a change-set file atomically through `disk`
/// ([`disk::write_atomically`]: a temporary name starting with '.', flushed,
/// renamed over nothing), then flush the folder. Returns a warning when the
/// folder could not be flushed (network file systems may refuse it; the
/// file itself is flushed). `replace` allows overwriting a damaged copy.
pub fn write_atomically(
    disk: &dyn Disk,
    dir: &Path,
    name: &str,
    bytes: &[u8],
    replace: bool,
) -> Result<Option<String>> {
    let existing = if replace {
        Existing::Replace
    } else {
        Existing::Refuse
    };
    disk::write_atomically(disk, dir, name, bytes, existing)?;
    let warning = disk::sync_dir(disk, dir).err().map(|e| {
        format!(
            "{e}; the file itself was flushed (network file systems often refuse to flush a folder)"
        )
    });
    Ok(warning)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> (Vec<u8>, String) {
        let id = "0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b";
        let changes = vec![
            Change {
                seq: 4,
                hlc: 100 << 16,
                table: "census",
                row_id: id.into(),
                op: Op::Update,
                field: Some("notes"),
                old_value: Value::Null,
                new_value: Value::Text("a, \"quoted\"\nline".into()),
            },
            Change {
                seq: 5,
                hlc: 101 << 16,
                table: "census",
                row_id: id.into(),
                op: Op::Delete,
                field: None,
                old_value: Value::Null,
                new_value: Value::Null,
            },
        ];
        let seen = BTreeMap::from([("0190a1b2-c3d4-7e5f-8a6b-000000000001".to_owned(), 9)]);
        encode(
            "0190a1b2-c3d4-7e5f-8a6b-0000000000ff",
            "tablet, one",
            &seen,
            &changes,
        )
        .unwrap()
    }

    /// An insert of one census row as the writer logs it, from seq 1.
    fn insert_run(fields: &[(&'static str, Value)]) -> Vec<Change> {
        fields
            .iter()
            .enumerate()
            .map(|(i, (field, value))| Change {
                seq: i as i64 + 1,
                hlc: 100 << 16,
                table: "census",
                row_id: "0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b".into(),
                op: Op::Insert,
                field: Some(field),
                old_value: Value::Null,
                new_value: value.clone(),
            })
            .collect()
    }

    #[test]
    fn an_insert_is_read_only_as_its_id_entry_then_its_other_fields() {
        let id = Value::Text("0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b".into());
        let visit = Value::Text("0190a1b2-c3d4-7e5f-8a6b-000000000010".into());
        let decode_run = |fields: &[(&'static str, Value)]| {
            let (bytes, _) = encode(
                "0190a1b2-c3d4-7e5f-8a6b-0000000000ff",
                "t",
                &BTreeMap::new(),
                &insert_run(fields),
            )
            .unwrap();
            decode(&bytes)
        };
        let whole = [
            ("id", id.clone()),
            ("visit_id", visit.clone()),
            ("alive", Value::Integer(3)),
        ];
        assert_eq!(decode_run(&whole).unwrap().changes.len(), 3);
        let headless = decode_run(&whole[1..]).unwrap_err();
        assert!(
            headless.starts_with("line 3:") && headless.contains("census.visit_id"),
            "{headless}"
        );
        let twice = decode_run(&[
            ("id", id.clone()),
            ("alive", Value::Integer(3)),
            ("alive", Value::Integer(4)),
        ])
        .unwrap_err();
        assert!(
            twice.starts_with("line 5:") && twice.contains("given twice"),
            "{twice}"
        );
        // An update between the id and a field breaks the run.
        let mut broken = insert_run(&whole);
        broken[1].op = Op::Update;
        let (bytes, _) = encode(
            "0190a1b2-c3d4-7e5f-8a6b-0000000000ff",
            "t",
            &BTreeMap::new(),
            &broken,
        )
        .unwrap();
        let e = decode(&bytes).unwrap_err();
        assert!(
            e.contains("census.alive") && e.contains("does not follow"),
            "{e}"
        );
    }

    #[test]
    fn a_written_change_set_reads_back_the_same() {
        let (bytes, hash) = sample();
        let cs = decode(&bytes).unwrap();
        assert_eq!(cs.sha256, hash);
        assert_eq!((cs.first_seq, cs.last_seq), (4, 5));
        assert_eq!(cs.device_name, "tablet, one");
        assert_eq!(
            cs.changes[0].new_value,
            Value::Text("a, \"quoted\"\nline".into())
        );
        assert_eq!(cs.changes[1].op, Op::Delete);
        assert_eq!(cs.seen.values().copied().collect::<Vec<_>>(), [9]);
    }

    /// Golden bytes of a change-set (format of schemas/changeset.json). The
    /// SHA-256 was checked with Python's hashlib, an independent
    /// implementation (common practice).
    #[test]
    fn a_change_set_has_exactly_these_bytes() {
        let (bytes, hash) = sample();
        let expected = "fieldcage-changeset,version=1,device=0190a1b2-c3d4-7e5f-8a6b-0000000000ff,seq=4-5,rows=2,\
                        seen=0190a1b2-c3d4-7e5f-8a6b-000000000001:9,\"name=tablet, one\"\n\
                        seq,hlc,table_name,row_id,op,field,old_value,new_value\n\
                        4,6553600,census,0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b,update,notes,,\"t:a, \"\"quoted\"\"\nline\"\n\
                        5,6619136,census,0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b,delete,,,\n\
                        sha256,f8d0223708d600a7cf9aad22d0177b69a09d5b68e482c4abfb3bfb658f5972cd\n";
        assert_eq!(String::from_utf8(bytes).unwrap(), expected);
        assert_eq!(
            hash,
            "f8d0223708d600a7cf9aad22d0177b69a09d5b68e482c4abfb3bfb658f5972cd"
        );
    }

    #[test]
    fn the_header_and_trailer_lines_are_as_documented() {
        let (bytes, hash) = sample();
        let text = String::from_utf8(bytes).unwrap();
        let first = text.lines().next().unwrap();
        assert_eq!(
            first,
            "fieldcage-changeset,version=1,device=0190a1b2-c3d4-7e5f-8a6b-0000000000ff,seq=4-5,rows=2,\
             seen=0190a1b2-c3d4-7e5f-8a6b-000000000001:9,\"name=tablet, one\""
        );
        assert_eq!(
            text.lines().nth(1).unwrap(),
            "seq,hlc,table_name,row_id,op,field,old_value,new_value"
        );
        assert!(text.ends_with(&format!("\nsha256,{hash}\n")));
    }

    #[test]
    fn canonical_names_are_plain_sequence_numbers() {
        assert_eq!(seq_of_file_name("57.csv"), Some(57));
        assert_eq!(seq_of_file_name("057.csv"), None);
        assert_eq!(seq_of_file_name("57 (1).csv"), None);
        assert_eq!(seq_of_file_name("57.csv.tmp"), None);
    }

    #[test]
    fn a_row_that_breaks_its_table_schema_is_refused_with_field_and_value() {
        let (bytes, _) = sample();
        let text = String::from_utf8(bytes).unwrap();
        let body: String = text
            .lines()
            .take(text.lines().count() - 1)
            .map(|l| format!("{l}\n"))
            .collect();
        let body = body.replacen("update,notes,,", "update,alive,,", 1);
        let body = body.replacen("\"t:a, \"\"quoted\"\"\nline\"", "i:-3", 1);
        let bytes = format!("{body}sha256,{}\n", sha256_hex(body.as_bytes()));
        let err = decode(bytes.as_bytes()).unwrap_err();
        assert!(err.contains("census.alive") && err.contains("-3"), "{err}");
    }
}
