//! Conflicts left by merging, for review, and their settlement.
//!
//! Three kinds (rules in [`crate::store::merge`]):
//! - **concurrent**: two edits of one field made without seeing each other,
//!   with different values; the later clock's value is in force;
//! - **deleted**: an edit of a row that was deleted by someone who had not
//!   seen the edit; the row stays deleted until someone decides;
//! - **duplicate**: two rows with the same unique key made on two devices
//!   (two censuses of one taxon at one visit); the row with the smaller id
//!   is shown, the other hidden;
//! - **orphan**: a live row that refers to a row that is deleted or hidden
//!   (a visit recorded on one tablet while another deleted its cage). It is
//!   found from the tables whenever conflicts are listed.
//!
//! Settling writes an ordinary change-log entry made with knowledge of both
//! versions, so the conflict closes on every device once it has synced.
//! Keeping what is in force logs the current value (or delete) again; taking
//! the other version writes it (or restores the row, or deletes the shown
//! duplicate so that the hidden one takes its place). A UI offering "keep
//! mine / take theirs" maps them onto [`ConflictChoice`] by
//! [`Version::is_local`].

use rusqlite::types::Value;
use rusqlite::{Connection, OptionalExtension};

use crate::store::log::{self, LogEntry};
use crate::store::{self, Op, Store};
use crate::tables;
use crate::{Error, Result};

/// Kind of a conflict.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum ConflictKind {
    /// Two edits of one field that did not see each other.
    Concurrent,
    /// An edit that the delete of its row did not see.
    Deleted,
    /// Two rows with the same unique key; one is hidden.
    Duplicate,
    /// A live row refers to a deleted or hidden row.
    Orphan,
}

impl ConflictKind {
    /// The kind's name in the API and the UI (`concurrent`, `deleted`, …).
    pub fn as_str(self) -> &'static str {
        match self {
            ConflictKind::Concurrent => "concurrent",
            ConflictKind::Deleted => "deleted",
            ConflictKind::Duplicate => "duplicate",
            ConflictKind::Orphan => "orphan",
        }
    }
}

/// One side of a conflict.
#[derive(Debug, Clone, PartialEq)]
pub struct Version {
    /// The device that made it.
    pub device_id: String,
    /// That device's name.
    pub device_name: String,
    /// Made on this device.
    pub is_local: bool,
    /// Its change-log entry (device seq); for a duplicate, the entry that
    /// created the row.
    pub seq: i64,
    /// Its hybrid-logical-clock timestamp.
    pub hlc: i64,
    /// What the entry did.
    pub op: Op,
    /// The value it set (empty for a delete, a restore or a duplicate row).
    pub value: Value,
    /// The row it is about (differs between the sides of a duplicate).
    pub row_id: String,
}

/// An open conflict.
#[derive(Debug, Clone, PartialEq)]
pub struct Conflict {
    /// Stable key, for [`resolve_conflict`].
    pub key: String,
    /// Kind.
    pub kind: ConflictKind,
    /// Table.
    pub table: String,
    /// Row (for a duplicate, the hidden row; for an orphan, the live row
    /// that refers to a gone one).
    pub row_id: String,
    /// Field, when the conflict is about one (for an orphan, the reference).
    pub field: Option<String>,
    /// The version in force (the value stored, the delete, the shown row;
    /// for an orphan, the entry that made the row it refers to gone).
    pub current: Version,
    /// The other version (the losing edit, the edit the delete did not see,
    /// the hidden row; for an orphan, the entry that set the reference).
    pub other: Version,
}

/// How to settle a conflict.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ConflictChoice {
    /// Keep the version in force.
    KeepCurrent,
    /// Take the other version instead.
    TakeOther,
}

/// Every open conflict, by table, row and field.
pub fn conflicts(store: &Store) -> Result<Vec<Conflict>> {
    let conn = store.conn();
    let me = store.device_id();
    let local_name = store.device_name()?;
    let mut out = Vec::new();
    let mut stmt = conn.prepare(
        "SELECT table_name, row_id, field, kind, other_device, other_seq, current_device, current_seq \
         FROM sync_conflict ORDER BY table_name, row_id, field, kind, other_device, other_seq",
    )?;
    let rows = stmt.query_map([], |r| {
        Ok((
            r.get::<_, String>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, String>(3)?,
            r.get::<_, String>(4)?,
            r.get::<_, i64>(5)?,
            r.get::<_, String>(6)?,
            r.get::<_, i64>(7)?,
        ))
    })?;
    for row in rows {
        let (table, row_id, field, kind, od, os, cd, cs) = row?;
        let kind = if kind == "deleted" {
            ConflictKind::Deleted
        } else {
            ConflictKind::Concurrent
        };
        let key = format!("{}:{table}:{row_id}:{field}:{od}:{os}", kind.as_str());
        out.push(Conflict {
            key,
            kind,
            current: version(conn, me, &local_name, &cd, cs)?,
            other: version(conn, me, &local_name, &od, os)?,
            field: (!field.is_empty()).then_some(field),
            table,
            row_id,
        });
    }
    let mut stmt = conn.prepare(
        "SELECT table_name, row_id, kept_row_id FROM sync_hidden ORDER BY table_name, row_id",
    )?;
    let rows = stmt.query_map([], |r| {
        Ok((
            r.get::<_, String>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
        ))
    })?;
    for row in rows {
        let (table, hidden, kept) = row?;
        out.push(Conflict {
            key: format!("duplicate:{table}:{hidden}"),
            kind: ConflictKind::Duplicate,
            current: creation(conn, me, &local_name, &table, &kept)?,
            other: creation(conn, me, &local_name, &table, &hidden)?,
            field: None,
            table,
            row_id: hidden,
        });
    }
    out.extend(orphans(conn, me, &local_name)?);
    Ok(out)
}

/// A live row that refers to a deleted or hidden row.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord)]
pub(crate) struct OrphanRow {
    table: String,
    field: String,
    parent_table: String,
    row_id: String,
    parent_id: String,
}

/// Every live row that refers to a deleted or hidden row.
pub(crate) fn orphan_rows(conn: &Connection) -> Result<Vec<OrphanRow>> {
    let mut out = Vec::new();
    for schema in tables::all() {
        for fk in &schema.foreign_keys {
            let mut stmt = conn.prepare_cached(&orphan_sql(schema, fk))?;
            let rows = stmt
                .query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?)))?
                .collect::<rusqlite::Result<Vec<_>>>()?;
            for (child, parent) in rows {
                out.push(OrphanRow {
                    table: schema.name.clone(),
                    field: fk.field.clone(),
                    parent_table: fk.resource.clone(),
                    row_id: child,
                    parent_id: parent,
                });
            }
        }
    }
    out.sort();
    Ok(out)
}

/// Live rows of `schema` whose reference `fk` names a gone row. From the
/// gone rows (few) to the rows referring to them, through the reference's
/// index: CROSS JOIN keeps SQLite to that order.
fn orphan_sql(schema: &tables::TableSchema, fk: &tables::ForeignKey) -> String {
    format!(
        "SELECT c.id, p.id FROM {parent} p CROSS JOIN {child} c ON c.{field} = p.id \
         WHERE p.deleted = 1 AND c.deleted = 0",
        child = schema.name,
        parent = fk.resource,
        field = fk.field
    )
}

fn orphans(conn: &Connection, me: &str, local_name: &str) -> Result<Vec<Conflict>> {
    orphan_rows(conn)?
        .into_iter()
        .map(|o| {
            Ok(Conflict {
                key: format!("orphan:{}:{}:{}", o.table, o.row_id, o.field),
                kind: ConflictKind::Orphan,
                current: gone_by(conn, me, local_name, &o.parent_table, &o.parent_id)?,
                other: field_set_by(conn, me, local_name, &o.table, &o.row_id, &o.field)?,
                table: o.table,
                row_id: o.row_id,
                field: Some(o.field),
            })
        })
        .collect()
}

/// The entry that made a row gone: its winning delete, or (for a row hidden
/// as a duplicate) the entry that created it.
fn gone_by(
    conn: &Connection,
    me: &str,
    local_name: &str,
    table: &str,
    row_id: &str,
) -> Result<Version> {
    let entries = log::row_entries(conn, table, row_id)?;
    let delete = entries
        .iter()
        .filter(|e| e.field.is_none())
        .max_by(|a, b| (a.hlc, &a.device_id, a.seq).cmp(&(b.hlc, &b.device_id, b.seq)));
    if let Some(e) = delete {
        let v = version_of(conn, me, local_name, row_id, e)?;
        if v.op == Op::Delete {
            return Ok(v);
        }
    }
    creation(conn, me, local_name, table, row_id)
}

/// The entry that gave a field its current value.
fn field_set_by(
    conn: &Connection,
    me: &str,
    local_name: &str,
    table: &str,
    row_id: &str,
    field: &str,
) -> Result<Version> {
    let entries = log::row_entries(conn, table, row_id)?;
    let e = entries
        .iter()
        .filter(|e| e.field.as_deref() == Some(field))
        .max_by(|a, b| (a.hlc, &a.device_id, a.seq).cmp(&(b.hlc, &b.device_id, b.seq)))
        .ok_or_else(|| Error::NotFound {
            table: table.to_owned(),
            id: row_id.to_owned(),
        })?;
    version_of(conn, me, local_name, row_id, e)
}

/// A device's name as people know it: this device's own name, the name
/// another device sent with its change-sets, else "device" and its id.
pub fn device_label(source: &impl store::Source, device: &str) -> Result<String> {
    let conn = store::conn_of(source);
    let (me, local): (String, String) = conn.query_row(
        "SELECT device_id, name FROM local_device WHERE singleton = 1",
        [],
        |r| Ok((r.get(0)?, r.get(1)?)),
    )?;
    device_name(conn, &me, &local, device)
}

fn device_name(conn: &Connection, me: &str, local_name: &str, device: &str) -> Result<String> {
    if device == me {
        return Ok(local_name.to_owned());
    }
    Ok(conn
        .query_row(
            "SELECT name FROM sync_device WHERE device_id = ?1",
            [device],
            |r| r.get(0),
        )
        .optional()?
        .unwrap_or_else(|| format!("device {device}")))
}

fn version(
    conn: &Connection,
    me: &str,
    local_name: &str,
    device: &str,
    seq: i64,
) -> Result<Version> {
    let change = log::entry_at(conn, device, seq)?
        .ok_or_else(|| Error::Invariant(format!("the change log holds no entry {device}/{seq}")))?;
    version_of(conn, me, local_name, &change.row_id, &change.entry)
}

/// The version an entry of `row_id` already read makes.
fn version_of(
    conn: &Connection,
    me: &str,
    local_name: &str,
    row_id: &str,
    e: &LogEntry,
) -> Result<Version> {
    Ok(Version {
        device_id: e.device_id.clone(),
        device_name: device_name(conn, me, local_name, &e.device_id)?,
        is_local: e.device_id == me,
        seq: e.seq,
        hlc: e.hlc,
        op: e.op,
        value: e.new_value.clone(),
        row_id: row_id.to_owned(),
    })
}

/// The version that created a row: its first `id` insert entry.
fn creation(
    conn: &Connection,
    me: &str,
    local_name: &str,
    table: &str,
    row_id: &str,
) -> Result<Version> {
    let entries = log::row_entries(conn, table, row_id)?;
    let e = entries
        .iter()
        .filter(|e| e.field.as_deref() == Some("id"))
        .min_by(|a, b| (a.hlc, &a.device_id, a.seq).cmp(&(b.hlc, &b.device_id, b.seq)))
        .ok_or_else(|| Error::NotFound {
            table: table.to_owned(),
            id: row_id.to_owned(),
        })?;
    let mut v = version_of(conn, me, local_name, row_id, e)?;
    v.value = Value::Null;
    Ok(v)
}

/// Settle the open conflict `key` (from [`conflicts`]).
pub fn resolve_conflict(store: &mut Store, key: &str, choice: ConflictChoice) -> Result<()> {
    let conflict = conflicts(store)?
        .into_iter()
        .find(|c| c.key == key)
        .ok_or_else(|| Error::NotFound {
            table: "conflict".into(),
            id: key.to_owned(),
        })?;
    let schema = tables::get(&conflict.table).ok_or_else(|| Error::NotFound {
        table: "table".into(),
        id: conflict.table.clone(),
    })?;
    let deleted: bool = store.conn().query_row(
        &format!("SELECT deleted FROM {} WHERE id = ?1", schema.name),
        [&conflict.row_id],
        |r| r.get::<_, i64>(0).map(|d| d == 1),
    )?;
    store.write(|w| match (conflict.kind, &conflict.field, choice) {
        (ConflictKind::Concurrent, Some(field), ConflictChoice::KeepCurrent) => {
            w.reaffirm_field(schema, &conflict.row_id, field)
        }
        (ConflictKind::Concurrent, Some(field), ConflictChoice::TakeOther) => {
            if deleted {
                w.set_field_of_deleted(
                    schema,
                    &conflict.row_id,
                    field,
                    conflict.other.value.clone(),
                )
            } else {
                w.update_fields(
                    schema,
                    &conflict.row_id,
                    &[(field.as_str(), conflict.other.value.clone())],
                )
                .map(drop)
            }
        }
        (ConflictKind::Concurrent, None, ConflictChoice::KeepCurrent)
        | (ConflictKind::Deleted, _, ConflictChoice::KeepCurrent) => {
            w.reaffirm_existence(schema, &conflict.row_id)
        }
        (ConflictKind::Concurrent, None, ConflictChoice::TakeOther)
        | (ConflictKind::Deleted, _, ConflictChoice::TakeOther) => {
            if deleted {
                w.restore(schema, &conflict.row_id)
            } else {
                w.delete(schema, &conflict.row_id)
            }
        }
        (ConflictKind::Duplicate, _, ConflictChoice::KeepCurrent) => {
            w.delete_hidden(schema, &conflict.other.row_id)
        }
        (ConflictKind::Duplicate, _, ConflictChoice::TakeOther) => {
            w.delete(schema, &conflict.current.row_id)
        }
        // The row that refers to a gone one goes too.
        (ConflictKind::Orphan, _, ConflictChoice::KeepCurrent) => {
            w.delete(schema, &conflict.row_id)
        }
        // The row referred to comes back.
        (ConflictKind::Orphan, Some(field), ConflictChoice::TakeOther) => {
            let parent_table = schema
                .foreign_keys
                .iter()
                .find(|fk| fk.field == *field)
                .and_then(|fk| tables::get(&fk.resource))
                .ok_or_else(|| {
                    Error::Invariant(format!("{} has no reference {field}", schema.name))
                })?;
            let parent: String = w.conn().query_row(
                &format!("SELECT {field} FROM {} WHERE id = ?1", schema.name),
                [&conflict.row_id],
                |r| r.get(0),
            )?;
            w.restore(parent_table, &parent)
        }
        (ConflictKind::Orphan, None, _) => Err(Error::Invariant(format!(
            "conflict {key} names no reference"
        ))),
    })
}

/// A record in people's words: its cage, its visit (kind and date), its
/// taxon, its tag. Falls back to the table and id.
pub fn describe_record(source: &impl store::Source, table: &str, row_id: &str) -> String {
    let fallback = format!("{} {row_id}", table.replace('_', " "));
    let Some(schema) = tables::get(table) else {
        return fallback;
    };
    let has = |f: &str| schema.fields.iter().any(|x| x.name == f);
    let conn = store::conn_of(source);
    let one = |sql: &str| -> Option<String> {
        conn.query_row(sql, [row_id], |r| r.get::<_, Option<String>>(0))
            .optional()
            .ok()
            .flatten()
            .flatten()
    };
    let mut parts: Vec<String> = vec![table.replace('_', " ")];
    let visit = if table == "visit" {
        Some("?1".to_owned())
    } else if has("visit_id") {
        Some(format!("(SELECT visit_id FROM {table} WHERE id = ?1)"))
    } else {
        None
    };
    if let Some(visit) = visit {
        // The visit's kind is said once: by the table name, or for a visit here.
        let kind = if table == "visit" {
            "v.kind || ' ' || "
        } else {
            ""
        };
        if let Some(cage) = one(&format!(
            "SELECT e.label || ' · ' || {kind}substr(v.visited_at, 1, 10) \
             FROM visit v JOIN enclosure e ON e.id = v.enclosure_id WHERE v.id = {visit}"
        )) {
            parts.push(format!("cage {cage}"));
        }
    } else if has("enclosure_id")
        && let Some(cage) = one(&format!(
            "SELECT e.label FROM {table} t JOIN enclosure e ON e.id = t.enclosure_id WHERE t.id = ?1"
        ))
    {
        parts.push(format!("cage {cage}"));
    }
    if has("taxon_id")
        && let Some(code) = one(&format!(
            "SELECT x.code FROM {table} t JOIN taxon x ON x.id = t.taxon_id WHERE t.id = ?1"
        ))
    {
        parts.push(code);
    }
    if has("leaf_id")
        && let Some(tag) = one(&format!(
            "SELECT l.tag_label FROM {table} t JOIN tagged_leaf l ON l.id = t.leaf_id WHERE t.id = ?1"
        ))
    {
        parts.push(format!("leaf {tag}"));
    } else if table == "tagged_leaf"
        && let Some(tag) = one("SELECT tag_label FROM tagged_leaf WHERE id = ?1")
    {
        parts.push(format!("leaf {tag}"));
    } else if (table == "enclosure" || has("label"))
        && let Some(label) = one(&format!("SELECT label FROM {table} WHERE id = ?1"))
    {
        parts.push(label);
    } else if has("code")
        && let Some(code) = one(&format!("SELECT code FROM {table} WHERE id = ?1"))
    {
        parts.push(code);
    }
    if parts.len() == 1 {
        return fallback;
    }
    parts.join(" · ")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Listing rows that refer to a gone row runs on every sync; it must go
    /// from the gone rows through each reference's index, never scan a big
    /// table of records (found when a repeat sync of a season took 0.1 s).
    #[test]
    fn orphan_lookups_use_the_reference_index() {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = crate::Store::open(dir.path().join("plan.db")).expect("open");
        for schema in tables::all() {
            for fk in &schema.foreign_keys {
                let sql = format!("EXPLAIN QUERY PLAN {}", orphan_sql(schema, fk));
                let plan: Vec<String> = store
                    .conn()
                    .prepare(&sql)
                    .expect("valid SQL")
                    .query_map([], |r| r.get(3))
                    .expect("plan")
                    .collect::<rusqlite::Result<_>>()
                    .expect("plan rows");
                let plan = plan.join(" / ");
                assert!(
                    plan.contains("SEARCH c USING"),
                    "{}.{}: {plan}",
                    schema.name,
                    fk.field
                );
            }
        }
    }
}
