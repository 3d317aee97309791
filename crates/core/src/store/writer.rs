//! The one write path. Every insert, update and delete is validated against
//! the table schema, checked for live references and unique keys, written,
//! and appended to the change log in the same transaction.

use rusqlite::types::Value;
use rusqlite::{Transaction, params};
use uuid::Uuid;

use super::merge::{self, same_value};
use super::rows::{Record, to_values};
use super::{Hlc, IdMaker, Op, read_values, table_of};
use crate::tables::{self, FieldType, TableSchema, display_value};
use crate::{Error, Result};

/// The answer kept for a save made with an operation id.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Receipt {
    /// The operation that answered (`save_census`).
    pub operation: String,
    /// Its answer, as the caller got it (JSON).
    pub response: String,
}

/// Writes inside one transaction; made by [`super::Store::write`].
pub struct Writer<'a> {
    tx: Transaction<'a>,
    device_id: &'a str,
    next_seq: i64,
    /// `next_seq` when the transaction began.
    first_seq: i64,
    hlc: Hlc,
    ids: &'a mut IdMaker,
    /// The store's clock when the transaction began, ms since the epoch.
    now: i64,
}

impl std::fmt::Debug for Writer<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Writer")
            .field("device_id", &self.device_id)
            .field("next_seq", &self.next_seq)
            .finish_non_exhaustive()
    }
}

impl<'a> Writer<'a> {
    pub(super) fn new(
        tx: Transaction<'a>,
        device_id: &'a str,
        next_seq: i64,
        hlc: Hlc,
        ids: &'a mut IdMaker,
        now: i64,
    ) -> Self {
        Writer {
            tx,
            device_id,
            next_seq,
            first_seq: next_seq,
            hlc,
            ids,
            now,
        }
    }

    pub(super) fn commit(self) -> Result<()> {
        // The clock and the sequence move only with a logged change: a
        // transaction that wrote nothing (a repeated save answered from its
        // receipt) leaves the device's bookkeeping as it was.
        if self.next_seq != self.first_seq {
            self.tx.execute(
                "UPDATE local_device SET next_seq = ?1, hlc = ?2 WHERE singleton = 1",
                params![self.next_seq, self.hlc.0],
            )?;
        }
        self.tx.commit()?;
        Ok(())
    }

    /// This database's device id.
    pub fn device_id(&self) -> &str {
        self.device_id
    }

    /// This device's human name, as this transaction sees it.
    pub fn device_name(&self) -> Result<String> {
        super::device_name(&self.tx)
    }

    /// A fresh row id (UUIDv7).
    pub fn new_id(&mut self) -> Uuid {
        self.ids.next()
    }

    /// The transaction, inside this crate (readers outside take the writer
    /// as a [`Source`](super::Source), to see this transaction's writes).
    pub(crate) fn conn(&self) -> &rusqlite::Connection {
        &self.tx
    }

    /// The stored answer of a save made with operation id `op_id`, if one
    /// was committed ([`Writer::keep_receipt`]).
    pub fn receipt(&self, op_id: &str) -> Result<Option<Receipt>> {
        use rusqlite::OptionalExtension;
        Ok(self
            .tx
            .query_row(
                "SELECT operation, response FROM operation_receipt WHERE op_id = ?1",
                [op_id],
                |r| {
                    Ok(Receipt {
                        operation: r.get(0)?,
                        response: r.get(1)?,
                    })
                },
            )
            .optional()?)
    }

    /// Keep the answer of this transaction's save under its operation id, so
    /// that the same request sent again is answered with it and writes
    /// nothing. Committed with the save or not at all.
    pub fn keep_receipt(&mut self, op_id: &str, operation: &str, response: &str) -> Result<()> {
        self.tx.execute(
            "INSERT INTO operation_receipt (op_id, operation, response, recorded_at) \
             VALUES (?1, ?2, ?3, ?4)",
            params![op_id, operation, response, self.now],
        )?;
        Ok(())
    }

    /// A live row of `R` by id, as this transaction sees it.
    pub fn get<R: Record>(&self, id: Uuid) -> Result<Option<R>> {
        super::get(&self.tx, id)
    }

    /// Insert a typed record.
    pub fn insert<R: Record>(&mut self, record: &R) -> Result<()> {
        let schema = table_of::<R>();
        let values = to_values(schema, record)?;
        self.insert_values(schema, values)
    }

    /// Insert one row given as values in the schema's column order.
    pub fn insert_values(&mut self, schema: &TableSchema, values: Vec<Value>) -> Result<()> {
        if values.len() != schema.fields.len() {
            return Err(Error::Invariant(format!(
                "{}: {} values for {} columns",
                schema.name,
                values.len(),
                schema.fields.len()
            )));
        }
        let values: Vec<Value> = schema
            .fields
            .iter()
            .zip(values)
            .map(|(f, v)| normalise(f.kind, v))
            .collect();
        for (f, v) in schema.fields.iter().zip(&values) {
            f.check(v).map_err(|reason| {
                Error::invalid(&schema.name, &f.name, display_value(v), reason)
            })?;
        }
        let id = match &values[0] {
            Value::Text(id) => id.clone(),
            other => {
                return Err(Error::invalid(
                    &schema.name,
                    "id",
                    display_value(other),
                    "is required",
                ));
            }
        };
        if Uuid::parse_str(&id).is_err() {
            return Err(Error::invalid(&schema.name, "id", &id, "is not a UUID"));
        }
        let exists: bool = self
            .tx
            .prepare_cached(&format!(
                "SELECT EXISTS (SELECT 1 FROM {} WHERE id = ?1)",
                schema.name
            ))?
            .query_row([&id], |r| r.get(0))?;
        if exists {
            return Err(Error::invalid(
                &schema.name,
                "id",
                &id,
                "is already used by another row",
            ));
        }
        self.check_references(schema, &values)?;
        self.check_unique(schema, &values, None)?;
        let placeholders = (1..=values.len())
            .map(|i| format!("?{i}"))
            .collect::<Vec<_>>()
            .join(", ");
        let sql = format!(
            "INSERT INTO {} ({}) VALUES ({placeholders})",
            schema.name,
            schema.column_list()
        );
        self.tx
            .prepare_cached(&sql)?
            .execute(rusqlite::params_from_iter(values.iter()))?;
        // One packed entry, one seq per field that has a value (the id
        // always has one).
        let set: Vec<(&str, &Value)> = schema
            .fields
            .iter()
            .zip(&values)
            .filter(|(_, v)| !matches!(v, Value::Null))
            .map(|(f, v)| (f.name.as_str(), v))
            .collect();
        let span = set.len() as i64;
        let packed = Value::Text(crate::store::log::pack_insert(set));
        self.log(Op::Insert, &schema.name, &id, None, &Value::Null, &packed)?;
        self.next_seq += span - 1;
        Ok(())
    }

    /// Store a typed record over its existing row, changing (and logging) only
    /// the fields that differ.
    pub fn update<R: Record>(&mut self, record: &R) -> Result<usize> {
        let schema = table_of::<R>();
        let values = to_values(schema, record)?;
        let changes: Vec<(&str, Value)> = schema
            .fields
            .iter()
            .zip(values)
            .skip(1)
            .map(|(f, v)| (f.name.as_str(), v))
            .collect();
        self.update_fields(schema, &record.id().to_string(), &changes)
    }

    /// Change some fields of a live row. Returns how many fields changed.
    pub fn update_fields(
        &mut self,
        schema: &TableSchema,
        id: &str,
        changes: &[(&str, Value)],
    ) -> Result<usize> {
        let mut row = self.live_row(schema, id)?;
        let old = row.clone();
        for (name, value) in changes {
            let i = schema.index(name).ok_or_else(|| {
                Error::invalid(&schema.name, *name, display_value(value), "is not a column")
            })?;
            if i == 0 {
                return Err(Error::invalid(
                    &schema.name,
                    "id",
                    display_value(value),
                    "cannot be changed",
                ));
            }
            let value = normalise(schema.fields[i].kind, value.clone());
            schema.fields[i].check(&value).map_err(|reason| {
                Error::invalid(&schema.name, *name, display_value(&value), reason)
            })?;
            row[i] = value;
        }
        // Only references this update changes must point at live rows: a
        // row whose parent was deleted on another device stays editable.
        let changed_refs: Vec<bool> = (0..row.len())
            .map(|i| !same_value(&old[i], &row[i]))
            .collect();
        self.check_references_where(schema, &row, &changed_refs)?;
        self.check_unique(schema, &row, Some(id))?;
        let mut changed = 0;
        for (i, f) in schema.fields.iter().enumerate().skip(1) {
            if same_value(&old[i], &row[i]) {
                continue;
            }
            self.tx
                .prepare_cached(&format!(
                    "UPDATE {} SET {} = ?1 WHERE id = ?2",
                    schema.name, f.name
                ))?
                .execute(params![row[i], id])?;
            self.log(
                Op::Update,
                &schema.name,
                id,
                Some(&f.name),
                &old[i],
                &row[i],
            )?;
            changed += 1;
        }
        if changed > 0 {
            merge::after_local_change(&self.tx, schema, id)?;
        }
        Ok(changed)
    }

    /// Delete a live row: it is tombstoned, never removed. Refused while live
    /// rows still refer to it.
    pub fn delete(&mut self, schema: &TableSchema, id: &str) -> Result<()> {
        self.live_row(schema, id)?;
        for other in tables::all() {
            for fk in other
                .foreign_keys
                .iter()
                .filter(|fk| fk.resource == schema.name)
            {
                let n: i64 = self
                    .tx
                    .prepare_cached(&format!(
                        "SELECT count(*) FROM {} WHERE {} = ?1 AND deleted = 0",
                        other.name, fk.field
                    ))?
                    .query_row([id], |r| r.get(0))?;
                if n > 0 {
                    return Err(Error::State(format!(
                        "{} {id} cannot be deleted: {n} {} row(s) refer to it through {}; delete those first",
                        schema.name, other.name, fk.field
                    )));
                }
            }
        }
        self.tx
            .prepare_cached(&format!(
                "UPDATE {} SET deleted = 1 WHERE id = ?1",
                schema.name
            ))?
            .execute([id])?;
        self.log_delete(&schema.name, id)?;
        merge::after_local_change(&self.tx, schema, id)
    }

    /// Make a tombstoned row live again (the change log records a
    /// `restore`). Refused when the row is live, when it is hidden as a
    /// duplicate of another device's row, when a live row now holds its
    /// unique key, or when it refers to a deleted row.
    pub fn restore(&mut self, schema: &TableSchema, id: &str) -> Result<()> {
        let row = self.any_row(schema, id)?;
        if !self.is_deleted(schema, id)? {
            return Err(Error::State(format!(
                "{} {id} is not deleted; there is nothing to restore",
                schema.name
            )));
        }
        if merge::is_hidden(&self.tx, &schema.name, id)? {
            return Err(Error::State(format!(
                "{} {id} is hidden as a duplicate of a row made on another device; \
                 settle the duplicate instead of restoring it",
                schema.name
            )));
        }
        self.check_references(schema, &row)?;
        self.check_unique(schema, &row, Some(id))?;
        self.tx
            .prepare_cached(&format!(
                "UPDATE {} SET deleted = 0 WHERE id = ?1",
                schema.name
            ))?
            .execute([id])?;
        self.log(
            Op::Restore,
            &schema.name,
            id,
            None,
            &Value::Null,
            &Value::Null,
        )?;
        merge::after_local_change(&self.tx, schema, id)
    }

    /// Log the field's current value again, unchanged: the entry records
    /// that someone who had seen every competing value chose this one (a
    /// conflict kept as it is). Works on deleted rows too.
    pub(crate) fn reaffirm_field(
        &mut self,
        schema: &TableSchema,
        id: &str,
        field: &str,
    ) -> Result<()> {
        let i = schema
            .index(field)
            .filter(|i| *i > 0)
            .ok_or_else(|| Error::invalid(&schema.name, field, id, "is not a column"))?;
        let row = self.any_row(schema, id)?;
        self.log(Op::Update, &schema.name, id, Some(field), &row[i], &row[i])?;
        merge::after_local_change(&self.tx, schema, id)
    }

    /// Set one field of a tombstoned row (a conflict on a deleted row settled
    /// in favour of the other value). The value is checked against the
    /// field's schema; references and unique keys do not apply to a deleted row.
    pub(crate) fn set_field_of_deleted(
        &mut self,
        schema: &TableSchema,
        id: &str,
        field: &str,
        value: Value,
    ) -> Result<()> {
        let i = schema
            .index(field)
            .filter(|i| *i > 0)
            .ok_or_else(|| Error::invalid(&schema.name, field, id, "is not a column"))?;
        if !self.is_deleted(schema, id)? {
            return Err(Error::State(format!("{} {id} is not deleted", schema.name)));
        }
        let old = self.any_row(schema, id)?.swap_remove(i);
        let value = normalise(schema.fields[i].kind, value);
        schema.fields[i]
            .check(&value)
            .map_err(|reason| Error::invalid(&schema.name, field, display_value(&value), reason))?;
        self.tx
            .prepare_cached(&format!(
                "UPDATE {} SET {} = ?1 WHERE id = ?2",
                schema.name, field
            ))?
            .execute(params![value, id])?;
        self.log(Op::Update, &schema.name, id, Some(field), &old, &value)?;
        merge::after_local_change(&self.tx, schema, id)
    }

    /// Log the row's current existence again (`delete` for a tombstoned row,
    /// `restore` for a live one) without changing it: a conflict about the
    /// row kept as it is.
    pub(crate) fn reaffirm_existence(&mut self, schema: &TableSchema, id: &str) -> Result<()> {
        self.any_row(schema, id)?;
        let op = if self.is_deleted(schema, id)? {
            Op::Delete
        } else {
            Op::Restore
        };
        self.log(op, &schema.name, id, None, &Value::Null, &Value::Null)?;
        merge::after_local_change(&self.tx, schema, id)
    }

    /// Tombstone a row that is hidden as a duplicate (it is stored with
    /// `deleted` = 1 already, but its own delete makes the choice final).
    pub(crate) fn delete_hidden(&mut self, schema: &TableSchema, id: &str) -> Result<()> {
        if !merge::is_hidden(&self.tx, &schema.name, id)? {
            return Err(Error::State(format!(
                "{} {id} is not hidden as a duplicate",
                schema.name
            )));
        }
        self.log_delete(&schema.name, id)?;
        merge::forget_hidden(&self.tx, &schema.name, id)?;
        merge::after_local_change(&self.tx, schema, id)
    }

    /// Any row with this id, tombstoned or not.
    fn any_row(&self, schema: &TableSchema, id: &str) -> Result<Vec<Value>> {
        use rusqlite::OptionalExtension;
        self.tx
            .prepare_cached(&format!(
                "SELECT {} FROM {} WHERE id = ?1",
                schema.column_list(),
                schema.name
            ))?
            .query_row([id], |r| read_values(r, schema.fields.len()))
            .optional()?
            .ok_or_else(|| Error::NotFound {
                table: schema.name.clone(),
                id: id.to_owned(),
            })
    }

    fn is_deleted(&self, schema: &TableSchema, id: &str) -> Result<bool> {
        Ok(self
            .tx
            .prepare_cached(&format!(
                "SELECT deleted FROM {} WHERE id = ?1",
                schema.name
            ))?
            .query_row([id], |r| r.get::<_, i64>(0))?
            == 1)
    }

    /// The live row with this id, as values in schema order.
    fn live_row(&self, schema: &TableSchema, id: &str) -> Result<Vec<Value>> {
        use rusqlite::OptionalExtension;
        self.tx
            .prepare_cached(&format!(
                "SELECT {} FROM {} WHERE id = ?1 AND deleted = 0",
                schema.column_list(),
                schema.name
            ))?
            .query_row([id], |r| read_values(r, schema.fields.len()))
            .optional()?
            .ok_or_else(|| Error::NotFound {
                table: schema.name.clone(),
                id: id.to_owned(),
            })
    }

    fn check_references(&self, schema: &TableSchema, row: &[Value]) -> Result<()> {
        self.check_references_where(schema, row, &vec![true; row.len()])
    }

    /// Check the references of the columns marked in `which`.
    fn check_references_where(
        &self,
        schema: &TableSchema,
        row: &[Value],
        which: &[bool],
    ) -> Result<()> {
        for fk in &schema.foreign_keys {
            let i = schema.index(&fk.field).unwrap_or_default();
            if !which[i] {
                continue;
            }
            let Value::Text(target) = &row[i] else {
                continue;
            };
            let live: bool = self
                .tx
                .prepare_cached(&format!(
                    "SELECT EXISTS (SELECT 1 FROM {} WHERE id = ?1 AND deleted = 0)",
                    fk.resource
                ))?
                .query_row([target], |r| r.get(0))?;
            if !live {
                return Err(Error::invalid(
                    &schema.name,
                    &fk.field,
                    target,
                    format!("refers to no {} row", fk.resource),
                ));
            }
        }
        Ok(())
    }

    fn check_unique(
        &self,
        schema: &TableSchema,
        row: &[Value],
        except: Option<&str>,
    ) -> Result<()> {
        for key in schema.unique_keys.iter().filter(|k| **k != [0]) {
            let sql = unique_lookup_sql(schema, key);
            let mut args: Vec<&Value> = Vec::with_capacity(key.len() + 1);
            let except = except
                .map(|e| Value::Text(e.to_owned()))
                .unwrap_or(Value::Null);
            args.push(&except);
            args.extend(key.iter().map(|i| &row[*i]));
            let taken: bool = self
                .tx
                .prepare_cached(&sql)?
                .query_row(rusqlite::params_from_iter(args), |r| r.get(0))?;
            if taken {
                let names: Vec<&str> = key
                    .iter()
                    .map(|i| schema.fields[*i].name.as_str())
                    .collect();
                let shown: Vec<String> = key.iter().map(|i| display_value(&row[*i])).collect();
                return Err(Error::invalid(
                    &schema.name,
                    names.join("+"),
                    shown.join(", "),
                    "is already used by another row",
                ));
            }
        }
        Ok(())
    }

    /// Log the deletion of a row (a whole-row entry with no values).
    fn log_delete(&mut self, table: &str, row_id: &str) -> Result<()> {
        self.log(Op::Delete, table, row_id, None, &Value::Null, &Value::Null)
    }

    fn log(
        &mut self,
        op: Op,
        table: &str,
        row_id: &str,
        field: Option<&str>,
        old: &Value,
        new: &Value,
    ) -> Result<()> {
        self.tx
            .prepare_cached(crate::store::log::INSERT_SQL)?
            .execute(params![
                self.device_id,
                self.next_seq,
                self.hlc.0,
                table,
                row_id,
                op.as_str(),
                field,
                old,
                new
            ])?;
        self.next_seq += 1;
        Ok(())
    }
}

/// The query that tells whether another live row holds a unique key's
/// values. It repeats the expressions of the partial unique indexes of the
/// migrations (a required column as is, an optional one with NULL as '') so
/// that SQLite answers from the index instead of scanning the table.
fn unique_lookup_sql(schema: &TableSchema, key: &[usize]) -> String {
    let cond = key
        .iter()
        .enumerate()
        .map(|(n, i)| {
            let f = &schema.fields[*i];
            if f.constraints.required {
                format!("{} = ?{}", f.name, n + 2)
            } else {
                format!("coalesce({}, '') = coalesce(?{}, '')", f.name, n + 2)
            }
        })
        .collect::<Vec<_>>()
        .join(" AND ");
    format!(
        "SELECT EXISTS (SELECT 1 FROM {} WHERE deleted = 0 AND id IS NOT ?1 AND {cond})",
        schema.name
    )
}

/// Canonical stored form: blank text is "not given" (NULL), so blank and
/// missing never differ; a whole number given for a number column is a real.
fn normalise(kind: FieldType, v: Value) -> Value {
    match v {
        Value::Text(t) if t.is_empty() => Value::Null,
        Value::Integer(i) if kind == FieldType::Number => Value::Real(i as f64),
        other => other,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every unique-key lookup is answered from an index: a scan would make
    /// each insert cost time in proportion to the table (found when a
    /// 200-cage season took minutes to build).
    #[test]
    fn unique_lookups_use_an_index() {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = crate::Store::open(dir.path().join("plan.db")).expect("open");
        for schema in tables::all() {
            for key in schema.unique_keys.iter().filter(|k| **k != [0]) {
                let sql = format!("EXPLAIN QUERY PLAN {}", unique_lookup_sql(schema, key));
                let mut stmt = store.conn().prepare(&sql).expect("valid SQL");
                let n = stmt.parameter_count();
                let plan: Vec<String> = stmt
                    .query_map(rusqlite::params_from_iter(vec![Value::Null; n]), |r| {
                        r.get(3)
                    })
                    .expect("plan")
                    .collect::<rusqlite::Result<_>>()
                    .expect("plan rows");
                let plan = plan.join(" / ");
                assert!(
                    plan.contains("USING INDEX") || plan.contains("USING COVERING INDEX"),
                    "{}: {plan}",
                    schema.name
                );
            }
        }
    }
}
