//! Merging: the state of a row is a pure function of its change-log entries
//! and of what each entry's device knew when it was made. This module holds
//! that function ([`settle_row`]) and the code that writes its result into the
//! data tables, used by the sync apply path and, for rows with open
//! conflicts or hidden duplicates, after local writes.
//!
//! Rules (docs/methods.md §10.1):
//! - Per field, last writer wins by hybrid logical clock, ties broken by
//!   device id (then sequence number, for entries of one transaction). Losing
//!   values stay in the change log.
//! - "x saw y" when x's device had applied y when x was made (same device:
//!   x came later). An entry that no other entry of its field saw is a
//!   *head*; each head other than the winner with a different value is one
//!   `concurrent` conflict. A device that applied an entry has a clock past
//!   it, so the winner is always a head and nobody's later edit loses to a
//!   value its author had already seen.
//! - A row is deleted when the winner of its delete/restore entries is a
//!   delete. Every head edit (`update`) of a deleted row that the winning
//!   delete did not see is a `deleted` conflict, whatever the clocks say.
//! - Two live rows with the same unique key (made on two devices): the row
//!   with the smallest id stays live, the others are stored with
//!   `deleted` = 1 and listed in `sync_hidden`.
//!
//! The result does not depend on the order in which change-sets arrive, so
//! every device that holds the same entries holds the same tables.

use std::collections::{BTreeMap, HashMap, HashSet};

use rusqlite::types::Value;
use rusqlite::{Connection, OptionalExtension, params};

use super::{Op, read_values, typed_text};
use crate::Result;
use crate::tables::{self, TableSchema};

/// One change-log entry, as the merge needs it.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Entry {
    pub device: String,
    pub seq: i64,
    pub hlc: i64,
    pub op: Op,
    pub field: Option<String>,
    pub value: Value,
}

impl Entry {
    /// The last-writer-wins order: clock, then device id, then sequence.
    fn rank(&self) -> (i64, &str, i64) {
        (self.hlc, self.device.as_str(), self.seq)
    }
}

/// From one seq on, how far a device had applied each other device.
type Epoch = (i64, HashMap<String, i64>);

/// What every device knew when it made its entries: per device, epochs
/// sorted by first seq.
#[derive(Debug, Default, Clone)]
pub(crate) struct Knowledge {
    epochs: HashMap<String, Vec<Epoch>>,
}

impl Knowledge {
    /// Everything recorded in `sync_knowledge`.
    pub fn load(conn: &Connection) -> Result<Knowledge> {
        let mut k = Knowledge::default();
        let mut stmt = conn.prepare_cached(
            "SELECT device_id, from_seq, other_device, upto_seq FROM sync_knowledge \
             ORDER BY device_id, from_seq",
        )?;
        let rows = stmt.query_map([], |r| {
            Ok((
                r.get::<_, String>(0)?,
                r.get::<_, i64>(1)?,
                r.get::<_, String>(2)?,
                r.get::<_, i64>(3)?,
            ))
        })?;
        for row in rows {
            let (device, from, other, upto) = row?;
            let list = k.epochs.entry(device).or_default();
            match list.last_mut() {
                Some((f, v)) if *f == from => {
                    v.insert(other, upto);
                }
                _ => list.push((from, HashMap::from([(other, upto)]))),
            }
        }
        Ok(k)
    }

    /// Add an epoch (kept sorted; an epoch with the same first seq is replaced).
    #[cfg(test)]
    pub fn add(&mut self, device: &str, from: i64, vector: HashMap<String, i64>) {
        let list = self.epochs.entry(device.to_owned()).or_default();
        match list.binary_search_by_key(&from, |(f, _)| *f) {
            Ok(i) => list[i].1 = vector,
            Err(i) => list.insert(i, (from, vector)),
        }
    }

    /// How far `device` had applied `other`'s entries when it made its entry `seq`.
    pub fn upto(&self, device: &str, seq: i64, other: &str) -> i64 {
        let Some(list) = self.epochs.get(device) else {
            return 0;
        };
        let i = list.partition_point(|(f, _)| *f <= seq);
        if i == 0 {
            return 0;
        }
        list[i - 1].1.get(other).copied().unwrap_or(0)
    }

    /// Whether entry `x` was made by a device that had seen entry `y`.
    pub fn saw(&self, x: &Entry, y: &Entry) -> bool {
        if x.device == y.device {
            x.seq > y.seq
        } else {
            self.upto(&x.device, x.seq, &y.device) >= y.seq
        }
    }
}

/// Kind of an open conflict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub(crate) enum ConflictKind {
    Concurrent,
    Deleted,
}

impl ConflictKind {
    pub fn as_str(self) -> &'static str {
        match self {
            ConflictKind::Concurrent => "concurrent",
            ConflictKind::Deleted => "deleted",
        }
    }
}

/// One open conflict of a row: `other` lost to (or was not seen by) `current`.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord)]
pub(crate) struct RowConflict {
    /// Field, or "" for the row's existence.
    pub field: String,
    pub kind: ConflictKind,
    pub other: (String, i64),
    pub current: (String, i64),
}

/// The merged state of one row.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct RowState {
    /// Winning value of every field that has entries.
    pub values: BTreeMap<String, Value>,
    /// The winner of the delete/restore entries is a delete.
    pub deleted: bool,
    /// Open conflicts, sorted.
    pub conflicts: Vec<RowConflict>,
}

/// Merge one row's entries (any order) into its state. Pure: the same
/// entries and knowledge always give the same state.
pub(crate) fn settle_row(entries: &[Entry], k: &Knowledge) -> RowState {
    let mut by_field: BTreeMap<&str, Vec<&Entry>> = BTreeMap::new();
    let mut existence: Vec<&Entry> = Vec::new();
    for e in entries {
        match (&e.field, e.op.is_existence()) {
            (_, true) => existence.push(e),
            (Some(f), false) => by_field.entry(f.as_str()).or_default().push(e),
            (None, false) => {}
        }
    }
    let mut conflicts = Vec::new();
    let existence_winner = existence
        .iter()
        .copied()
        .max_by(|a, b| a.rank().cmp(&b.rank()));
    if let Some(w) = existence_winner {
        for h in heads(&existence, k) {
            if h.op != w.op {
                conflicts.push(conflict("", ConflictKind::Concurrent, h, w));
            }
        }
    }
    let deleted_by = existence_winner.filter(|w| w.op == Op::Delete);
    let mut values = BTreeMap::new();
    for (field, list) in &by_field {
        let Some(w) = list.iter().copied().max_by(|a, b| a.rank().cmp(&b.rank())) else {
            continue;
        };
        values.insert((*field).to_owned(), w.value.clone());
        for h in heads(list, k) {
            if !std::ptr::eq(h, w) && !same_value(&h.value, &w.value) {
                conflicts.push(conflict(field, ConflictKind::Concurrent, h, w));
            }
            if let Some(d) = deleted_by
                && h.op == Op::Update
                && !k.saw(d, h)
            {
                conflicts.push(conflict(field, ConflictKind::Deleted, h, d));
            }
        }
    }
    conflicts.sort();
    RowState {
        values,
        deleted: deleted_by.is_some(),
        conflicts,
    }
}

fn conflict(field: &str, kind: ConflictKind, other: &Entry, current: &Entry) -> RowConflict {
    RowConflict {
        field: field.to_owned(),
        kind,
        other: (other.device.clone(), other.seq),
        current: (current.device.clone(), current.seq),
    }
}

/// The entries of a list that no other entry of the list saw.
fn heads<'e>(list: &[&'e Entry], k: &Knowledge) -> Vec<&'e Entry> {
    list.iter()
        .copied()
        .filter(|h| !list.iter().any(|x| !std::ptr::eq(*x, *h) && k.saw(x, h)))
        .collect()
}

/// Equality of stored values, with 1 and 1.0 equal and reals compared bit
/// for bit.
pub(crate) fn same_value(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Integer(x), Value::Real(y)) | (Value::Real(y), Value::Integer(x)) => {
            (*x as f64) == *y
        }
        (Value::Real(x), Value::Real(y)) => x.to_bits() == y.to_bits(),
        _ => a == b,
    }
}

/// Every change-log entry of one row.
pub(crate) fn row_entries(conn: &Connection, table: &str, row_id: &str) -> Result<Vec<Entry>> {
    Ok(super::log::row_entries(conn, table, row_id)?
        .into_iter()
        .map(|e| Entry {
            device: e.device_id,
            seq: e.seq,
            hlc: e.hlc,
            op: e.op,
            field: e.field,
            value: e.new_value,
        })
        .collect())
}

/// The one unique key (besides the id) of a table, as column positions.
pub(crate) fn natural_key(schema: &TableSchema) -> Option<&[usize]> {
    schema
        .unique_keys
        .iter()
        .find(|k| k.as_slice() != [0])
        .map(Vec::as_slice)
}

/// A key's values as they are compared by the partial unique indexes: an
/// empty optional value counts as empty text.
fn key_values(schema: &TableSchema, key: &[usize], row: &[Value]) -> Vec<Value> {
    key.iter()
        .map(|i| match &row[*i] {
            Value::Null if !schema.fields[*i].constraints.required => Value::Text(String::new()),
            v => v.clone(),
        })
        .collect()
}

fn key_text(values: &[Value]) -> String {
    let cells: Vec<String> = values.iter().map(typed_text::encode).collect();
    serde_json::to_string(&cells).unwrap_or_default()
}

fn key_from_text(text: &str) -> Option<Vec<Value>> {
    let cells: Vec<String> = serde_json::from_str(text).ok()?;
    cells.iter().map(|c| typed_text::decode(c).ok()).collect()
}

/// The common case, stored without settling: the entries that arrived
/// for a row (op, field, value) are one insert (each field once) of a
/// row this database does not hold. Its state is its values (one entry
/// per field: no conflict), stored live. Returns false, having written
/// nothing, when the row is not such a case: it exists (the primary key
/// refuses it) or a live row holds its unique key; then it must be
/// settled ([`Settler::settle`]).
///
/// Rows held back for their key group or hidden as duplicates hold no
/// key in the unique index, so a new row can go in live beside them:
/// when their group is settled, the live rows with its key are counted
/// in ([`settle_group`]), so the result is the one holding it back too
/// would give.
pub(crate) fn insert_new<'v>(
    conn: &Connection,
    schema: &TableSchema,
    row_id: &str,
    arrived: impl Iterator<Item = (Op, Option<&'v str>, &'v Value)>,
) -> Result<bool> {
    let n = schema.fields.len();
    // The values are bound where they lie (no copies): the columns, then
    // `deleted` = 0.
    let live = 0_i64;
    let mut args: Vec<&dyn rusqlite::ToSql> = vec![&rusqlite::types::Null; n + 1];
    let mut set = vec![false; n];
    for (op, field, value) in arrived {
        match field.and_then(|f| schema.index(f)) {
            Some(i) if op == Op::Insert && !set[i] => {
                set[i] = true;
                args[i] = value;
            }
            _ => return Ok(false),
        }
    }
    args[0] = &row_id;
    args[n] = &live;
    match conn
        .prepare_cached(&table_sql(schema).insert_row)?
        .execute(&*args)
    {
        Ok(_) => Ok(true),
        Err(e) if is_unique_violation(&e) || is_primary_key_violation(&e) => Ok(false),
        Err(e) => Err(e.into()),
    }
}

/// Whether a row is hidden as a duplicate.
pub(crate) fn is_hidden(conn: &Connection, table: &str, row_id: &str) -> Result<bool> {
    Ok(conn
        .prepare_cached(
            "SELECT EXISTS (SELECT 1 FROM sync_hidden WHERE table_name = ?1 AND row_id = ?2)",
        )?
        .query_row([table, row_id], |r| r.get(0))?)
}

/// Stop listing a row as hidden.
pub(crate) fn forget_hidden(conn: &Connection, table: &str, row_id: &str) -> Result<()> {
    conn.prepare_cached("DELETE FROM sync_hidden WHERE table_name = ?1 AND row_id = ?2")?
        .execute([table, row_id])?;
    Ok(())
}

/// A group of rows sharing one unique key, to be settled.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
struct Group {
    table: String,
    key_text: String,
}

/// Rows whose entries changed, settled together in one transaction.
#[derive(Debug, Default)]
pub(crate) struct Settler {
    /// Rows that are live by their entries but held back (deleted = 1) until
    /// their key group is settled: group → row ids.
    pending: BTreeMap<Group, Vec<String>>,
    /// Key values of each group (for the index lookup of live rows).
    group_values: HashMap<Group, Vec<Value>>,
    /// Groups to settle that have no pending row.
    extra: HashSet<Group>,
    /// Whether each table had hidden rows when this settling began (rows
    /// hidden meanwhile are pending in memory).
    tables_with_hidden: HashMap<String, bool>,
}

impl Settler {
    /// Recompute one row from its entries and store it: field values, the
    /// deleted flag, its conflicts. `arrived` are the row's entries in the
    /// change-set being applied (already in the log): a row this database
    /// does not hold yet has no other entries, so it is settled from them
    /// alone. Rows with a unique key that are live by their entries and may
    /// share it with another row are stored as deleted until
    /// [`Settler::finish`].
    pub fn settle(
        &mut self,
        conn: &Connection,
        schema: &'static TableSchema,
        row_id: &str,
        arrived: &[Entry],
        k: &Knowledge,
    ) -> Result<()> {
        let sql = table_sql(schema);
        let current: Option<Vec<Value>> = conn
            .prepare_cached(&sql.select_row)?
            .query_row([row_id], |r| read_values(r, schema.fields.len()))
            .optional()?;
        let exists = current.is_some();
        let state = if exists {
            self.note_hidden_behind(conn, schema, row_id)?;
            if is_hidden(conn, &schema.name, row_id)? {
                forget_hidden(conn, &schema.name, row_id)?;
            }
            settle_row(&row_entries(conn, &schema.name, row_id)?, k)
        } else {
            settle_row(arrived, k)
        };
        let mut row = current.unwrap_or_else(|| vec![Value::Null; schema.fields.len()]);
        row[0] = Value::Text(row_id.to_owned());
        for (field, value) in &state.values {
            if let Some(i) = schema.index(field).filter(|i| *i > 0) {
                row[i] = value.clone();
            }
        }
        let mut hold = None;
        if let (false, Some(key)) = (state.deleted, natural_key(schema)) {
            let values = key_values(schema, key, &row);
            let group = Group {
                table: schema.name.clone(),
                key_text: key_text(&values),
            };
            if exists || self.pending.contains_key(&group) || self.hidden_with_key(conn, &group)? {
                hold = Some((group, values));
            } else {
                // A new row goes in live; the unique index tells whether a
                // live row holds its key (then it waits for the group to be
                // settled like the others).
                let mut args = row.clone();
                args.push(Value::Integer(0));
                match conn
                    .prepare_cached(&sql.insert_row)?
                    .execute(rusqlite::params_from_iter(args.iter()))
                {
                    Ok(_) => {
                        if !state.conflicts.is_empty() {
                            write_conflicts(conn, &schema.name, row_id, &state.conflicts)?;
                        }
                        return Ok(());
                    }
                    Err(e) if is_unique_violation(&e) => hold = Some((group, values)),
                    Err(e) => return Err(e.into()),
                }
            }
        }
        let mut args = row;
        args.push(Value::Integer(i64::from(state.deleted || hold.is_some())));
        let statement = if exists {
            &sql.update_row
        } else {
            &sql.insert_row
        };
        conn.prepare_cached(statement)?
            .execute(rusqlite::params_from_iter(args.iter()))?;
        if let Some((group, values)) = hold {
            self.group_values.insert(group.clone(), values);
            self.pending
                .entry(group)
                .or_default()
                .push(row_id.to_owned());
        }
        if exists || !state.conflicts.is_empty() {
            write_conflicts(conn, &schema.name, row_id, &state.conflicts)?;
        }
        Ok(())
    }

    /// Whether a table had rows hidden as duplicates when this settling
    /// began (asked of the database once per table).
    fn has_hidden(&mut self, conn: &Connection, table: &str) -> Result<bool> {
        if let Some(any) = self.tables_with_hidden.get(table) {
            return Ok(*any);
        }
        let any: bool = conn
            .prepare_cached("SELECT EXISTS (SELECT 1 FROM sync_hidden WHERE table_name = ?1)")?
            .query_row([table], |r| r.get(0))?;
        self.tables_with_hidden.insert(table.to_owned(), any);
        Ok(any)
    }

    /// Whether a row hidden as a duplicate has this key (asked of the
    /// database only for tables that have hidden rows at all).
    fn hidden_with_key(&mut self, conn: &Connection, group: &Group) -> Result<bool> {
        if !self.has_hidden(conn, &group.table)? {
            return Ok(false);
        }
        Ok(conn
            .prepare_cached(
                "SELECT EXISTS (SELECT 1 FROM sync_hidden WHERE table_name = ?1 AND key_text = ?2)",
            )?
            .query_row([&group.table, &group.key_text], |r| r.get(0))?)
    }

    /// Rows hidden behind `row_id` must be settled again: the row they lost
    /// to may have left their key group or been deleted.
    fn note_hidden_behind(
        &mut self,
        conn: &Connection,
        schema: &TableSchema,
        row_id: &str,
    ) -> Result<()> {
        if natural_key(schema).is_none() {
            return Ok(());
        }
        let mut stmt = conn.prepare_cached(
            "SELECT key_text FROM sync_hidden WHERE table_name = ?1 AND kept_row_id = ?2",
        )?;
        let keys = stmt
            .query_map([&schema.name, row_id], |r| r.get::<_, String>(0))?
            .collect::<rusqlite::Result<Vec<_>>>()?;
        for key_text in keys {
            self.extra.insert(Group {
                table: schema.name.clone(),
                key_text,
            });
        }
        Ok(())
    }

    /// Settle every key group touched: in each, the row with the smallest id
    /// among the rows that are live by their entries stays live.
    pub fn finish(mut self, conn: &Connection) -> Result<()> {
        let mut groups: Vec<Group> = self.pending.keys().cloned().collect();
        groups.extend(
            self.extra
                .iter()
                .filter(|g| !self.pending.contains_key(*g))
                .cloned(),
        );
        groups.sort();
        for group in groups {
            let Some(schema) = tables::get(&group.table) else {
                continue;
            };
            if natural_key(schema).is_none() {
                continue;
            }
            let values = match self.group_values.get(&group) {
                Some(v) => v.clone(),
                None => match key_from_text(&group.key_text) {
                    Some(v) => v,
                    None => continue,
                },
            };
            let pending = self.pending.remove(&group).unwrap_or_default();
            settle_group(conn, schema, &group.key_text, &values, &pending)?;
        }
        Ok(())
    }
}

/// Settle one key group: the smallest id among its live, hidden and pending
/// rows stays live; the others are hidden behind it.
fn settle_group(
    conn: &Connection,
    schema: &TableSchema,
    key_text: &str,
    values: &[Value],
    pending: &[String],
) -> Result<()> {
    let live: Vec<String> = conn
        .prepare_cached(&table_sql(schema).live_by_key)?
        .query_map(rusqlite::params_from_iter(values.iter()), |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    let hidden: Vec<String> = conn
        .prepare_cached("SELECT row_id FROM sync_hidden WHERE table_name = ?1 AND key_text = ?2")?
        .query_map([&schema.name, key_text], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    let mut all: Vec<&String> = live.iter().chain(&hidden).chain(pending).collect();
    all.sort();
    all.dedup();
    let Some((keep, others)) = all.split_first() else {
        return Ok(());
    };
    for other in others {
        conn.prepare_cached(&format!(
            "UPDATE {} SET deleted = 1 WHERE id = ?1",
            schema.name
        ))?
        .execute([other])?;
        conn.prepare_cached(
            "INSERT INTO sync_hidden (table_name, row_id, key_text, kept_row_id) \
             VALUES (?1, ?2, ?3, ?4) \
             ON CONFLICT (table_name, row_id) DO UPDATE SET key_text = ?3, kept_row_id = ?4",
        )?
        .execute(params![schema.name, other, key_text, keep])?;
    }
    forget_hidden(conn, &schema.name, keep)?;
    conn.prepare_cached(&format!(
        "UPDATE {} SET deleted = 0 WHERE id = ?1",
        schema.name
    ))?
    .execute([keep])?;
    Ok(())
}

fn is_unique_violation(e: &rusqlite::Error) -> bool {
    matches!(
        e,
        rusqlite::Error::SqliteFailure(f, _)
            if f.extended_code == rusqlite::ffi::SQLITE_CONSTRAINT_UNIQUE
    )
}

fn is_primary_key_violation(e: &rusqlite::Error) -> bool {
    matches!(
        e,
        rusqlite::Error::SqliteFailure(f, _)
            if f.extended_code == rusqlite::ffi::SQLITE_CONSTRAINT_PRIMARYKEY
    )
}

/// The statements the merge runs on each table, made once.
struct TableSql {
    select_row: String,
    update_row: String,
    insert_row: String,
    /// Ids of live rows with the natural key's values (?1..).
    live_by_key: String,
}

fn table_sql(schema: &TableSchema) -> &'static TableSql {
    static SQL: std::sync::OnceLock<HashMap<String, TableSql>> = std::sync::OnceLock::new();
    let all = SQL.get_or_init(|| {
        tables::all()
            .iter()
            .map(|t| (t.name.clone(), TableSql::new(t)))
            .collect()
    });
    &all[&schema.name]
}

impl TableSql {
    fn new(schema: &TableSchema) -> TableSql {
        let n = schema.fields.len();
        let sets: Vec<String> = schema
            .fields
            .iter()
            .enumerate()
            .skip(1)
            .map(|(i, f)| format!("{} = ?{}", f.name, i + 1))
            .collect();
        let marks: Vec<String> = (1..=n + 1).map(|i| format!("?{i}")).collect();
        // The same expressions as the partial unique indexes (an optional
        // column as coalesce(column, '')), so that SQLite uses them.
        let cond = natural_key(schema)
            .unwrap_or(&[0])
            .iter()
            .enumerate()
            .map(|(n, i)| {
                let f = &schema.fields[*i];
                if f.constraints.required {
                    format!("{} = ?{}", f.name, n + 1)
                } else {
                    format!("coalesce({}, '') = ?{}", f.name, n + 1)
                }
            })
            .collect::<Vec<_>>()
            .join(" AND ");
        TableSql {
            select_row: format!(
                "SELECT {} FROM {} WHERE id = ?1",
                schema.column_list(),
                schema.name
            ),
            update_row: format!(
                "UPDATE {} SET {}, deleted = ?{} WHERE id = ?1",
                schema.name,
                sets.join(", "),
                n + 1
            ),
            insert_row: format!(
                "INSERT INTO {} ({}, deleted) VALUES ({})",
                schema.name,
                schema.column_list(),
                marks.join(", ")
            ),
            live_by_key: format!(
                "SELECT id FROM {} WHERE deleted = 0 AND {cond}",
                schema.name
            ),
        }
    }
}

/// Replace a row's open conflicts.
fn write_conflicts(
    conn: &Connection,
    table: &str,
    row_id: &str,
    conflicts: &[RowConflict],
) -> Result<()> {
    conn.prepare_cached("DELETE FROM sync_conflict WHERE table_name = ?1 AND row_id = ?2")?
        .execute([table, row_id])?;
    for c in conflicts {
        conn.prepare_cached(
            "INSERT OR IGNORE INTO sync_conflict (table_name, row_id, field, kind, other_device, \
             other_seq, current_device, current_seq) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
        )?
        .execute(params![
            table,
            row_id,
            c.field,
            c.kind.as_str(),
            c.other.0,
            c.other.1,
            c.current.0,
            c.current.1
        ])?;
    }
    Ok(())
}

/// After a local update, delete or restore of a row: settle again the rows
/// hidden behind it, and recompute its conflicts if it has any. (A local
/// entry is always the newest and has seen everything this device holds, so
/// the row's own values are already right.)
pub(crate) fn after_local_change(
    conn: &Connection,
    schema: &TableSchema,
    row_id: &str,
) -> Result<()> {
    let mut settler = Settler::default();
    settler.note_hidden_behind(conn, schema, row_id)?;
    if !settler.extra.is_empty() {
        settler.finish(conn)?;
    }
    let has_conflicts: bool = conn
        .prepare_cached(
            "SELECT EXISTS (SELECT 1 FROM sync_conflict WHERE table_name = ?1 AND row_id = ?2)",
        )?
        .query_row([&schema.name, row_id], |r| r.get(0))?;
    if has_conflicts {
        let k = Knowledge::load(conn)?;
        let state = settle_row(&row_entries(conn, &schema.name, row_id)?, &k);
        write_conflicts(conn, &schema.name, row_id, &state.conflicts)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn e(device: &str, seq: i64, hlc: i64, op: Op, field: Option<&str>, v: i64) -> Entry {
        Entry {
            device: device.into(),
            seq,
            hlc,
            op,
            field: field.map(str::to_owned),
            value: Value::Integer(v),
        }
    }

    fn knows(pairs: &[(&str, i64, &str, i64)]) -> Knowledge {
        let mut k = Knowledge::default();
        for (d, from, other, upto) in pairs {
            k.add(d, *from, HashMap::from([((*other).to_owned(), *upto)]));
        }
        k
    }

    #[test]
    fn the_later_clock_wins_and_ties_go_to_the_device_id() {
        let k = Knowledge::default();
        let a = e("a", 1, 100, Op::Update, Some("alive"), 5);
        let b = e("b", 1, 200, Op::Update, Some("alive"), 6);
        let s = settle_row(&[b.clone(), a.clone()], &k);
        assert_eq!(s.values["alive"], Value::Integer(6));
        // Same clock: device id "b" > "a" wins (docs/methods.md §10.1: ties by device id).
        let b_tie = e("b", 1, 100, Op::Update, Some("alive"), 6);
        let s = settle_row(&[a, b_tie], &k);
        assert_eq!(s.values["alive"], Value::Integer(6));
    }

    #[test]
    fn edits_that_did_not_see_each_other_make_one_conflict() {
        let k = Knowledge::default();
        let a = e("a", 1, 100, Op::Update, Some("alive"), 5);
        let b = e("b", 1, 200, Op::Update, Some("alive"), 6);
        let s = settle_row(&[a, b], &k);
        assert_eq!(s.conflicts.len(), 1);
        assert_eq!(s.conflicts[0].other, ("a".into(), 1));
        assert_eq!(s.conflicts[0].current, ("b".into(), 1));
    }

    #[test]
    fn an_edit_that_saw_the_other_is_no_conflict() {
        // b made its entry 1 after applying a's entries up to 1.
        let k = knows(&[("b", 1, "a", 1)]);
        let a = e("a", 1, 100, Op::Update, Some("alive"), 5);
        let b = e("b", 1, 200, Op::Update, Some("alive"), 6);
        assert!(settle_row(&[a, b], &k).conflicts.is_empty());
    }

    #[test]
    fn equal_values_made_apart_are_no_conflict() {
        let k = Knowledge::default();
        let a = e("a", 1, 100, Op::Insert, Some("code"), 5);
        let b = e("b", 1, 200, Op::Insert, Some("code"), 5);
        assert!(settle_row(&[a, b], &k).conflicts.is_empty());
    }

    #[test]
    fn an_edit_against_a_delete_is_a_conflict_even_when_it_is_later() {
        let k = Knowledge::default();
        let ins = e("a", 1, 50, Op::Insert, Some("alive"), 1);
        let del = e("a", 2, 100, Op::Delete, None, 0);
        let k2 = knows(&[("b", 1, "a", 1)]);
        let edit = e("b", 1, 300, Op::Update, Some("alive"), 9);
        let s = settle_row(&[ins.clone(), del.clone(), edit.clone()], &k2);
        assert!(s.deleted);
        assert_eq!(s.values["alive"], Value::Integer(9), "the value is kept");
        assert_eq!(s.conflicts.len(), 1);
        assert_eq!(s.conflicts[0].kind, ConflictKind::Deleted);
        // Without knowledge of the insert the edit is also concurrent with it.
        let s = settle_row(&[ins, del, edit], &k);
        assert!(s.conflicts.iter().any(|c| c.kind == ConflictKind::Deleted));
    }

    #[test]
    fn a_restore_after_seeing_the_delete_makes_the_row_live() {
        let k = knows(&[("b", 1, "a", 2)]);
        let del = e("a", 2, 100, Op::Delete, None, 0);
        let restore = e("b", 1, 300, Op::Restore, None, 0);
        let s = settle_row(&[del, restore], &k);
        assert!(!s.deleted);
        assert!(s.conflicts.is_empty());
    }
}
