//! Reading an export folder back into a database: the inverse of
//! [`crate::export`], so that export → import → export gives the same bytes.
//!
//! Everything is checked before anything is kept. Each `<table>.csv` (a
//! missing file is a table without rows; `datapackage.json` is not needed) is
//! read whole and refused when it is larger than [`MAX_FILE_BYTES`], is not
//! UTF-8, ends inside a quoted value, has a header that is not exactly the
//! table's columns (in any order), has a row with the wrong number of values,
//! a value the table schema refuses, or an id used twice. Then every row of
//! every file is inserted through the one write path
//! ([`Writer::insert_values`]) in a single transaction, which also checks
//! references and unique keys against the database; the first problem rolls
//! the whole import back.
//!
//! Every problem is an [`Error::Import`] naming the file, the 1-based line
//! (the header is line 1; a row that spans lines is named by its first line)
//! and the column.

use std::collections::HashMap;
use std::fs::{self, File};
use std::io::Read;
use std::path::Path;

use rusqlite::types::Value;

use crate::export;
use crate::store::{Store, Writer};
use crate::tables::{self, TableSchema};
use crate::{Error, Result};

/// Largest table file an import reads (512 MiB): far above a season's data,
/// low enough that a wrong file cannot exhaust a tablet's memory.
pub const MAX_FILE_BYTES: u64 = 512 * 1024 * 1024;

/// What an import added.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ImportSummary {
    /// Rows inserted per table, in import (dependency) order.
    pub tables: Vec<(String, usize)>,
}

/// One data row of a file, values in schema column order.
#[derive(Debug)]
struct Row {
    line: u64,
    values: Vec<Value>,
}

/// One table's file, read and checked.
#[derive(Debug)]
struct TableFile {
    schema: &'static TableSchema,
    file: String,
    rows: Vec<Row>,
}

/// Import every table file found in `dir`, all or nothing.
pub fn import(store: &mut Store, dir: &Path) -> Result<ImportSummary> {
    let meta = fs::metadata(dir).map_err(|e| Error::io(dir, e))?;
    if !meta.is_dir() {
        return Err(Error::State(format!("{}: is not a folder", dir.display())));
    }
    let mut files = Vec::new();
    let mut found = 0;
    for schema in tables::all() {
        let file = export::file_name(schema);
        let rows = match read_bounded(&dir.join(&file))? {
            Some(bytes) => {
                found += 1;
                parse_table(schema, &file, &bytes)?
            }
            None => Vec::new(),
        };
        files.push(TableFile { schema, file, rows });
    }
    if found == 0 {
        // Almost certainly the wrong folder: an export always writes every file.
        return Err(Error::State(format!(
            "{}: holds none of the table files ({}, …); nothing was imported",
            dir.display(),
            export::file_name(&tables::all()[0])
        )));
    }
    let summary = ImportSummary {
        tables: files
            .iter()
            .map(|t| (t.schema.name.clone(), t.rows.len()))
            .collect(),
    };
    store.write(|w| {
        for table in files {
            insert_table(w, table)?;
        }
        Ok(())
    })?;
    Ok(summary)
}

/// The bytes of a file, `None` when it does not exist.
fn read_bounded(path: &Path) -> Result<Option<Vec<u8>>> {
    let meta = match fs::metadata(path) {
        Ok(meta) => meta,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(Error::io(path, e)),
    };
    if !meta.is_file() {
        return Err(Error::State(format!(
            "{}: is not a regular file; nothing was imported",
            path.display()
        )));
    }
    let too_large = |size: u64| {
        Error::State(format!(
            "{}: {size} bytes is more than an import file may hold ({} MiB); nothing was imported",
            path.display(),
            MAX_FILE_BYTES / (1024 * 1024)
        ))
    };
    if meta.len() > MAX_FILE_BYTES {
        return Err(too_large(meta.len()));
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    File::open(path)
        .and_then(|f| f.take(MAX_FILE_BYTES + 1).read_to_end(&mut bytes))
        .map_err(|e| Error::io(path, e))?;
    // The file may have grown since it was measured.
    if bytes.len() as u64 > MAX_FILE_BYTES {
        return Err(too_large(bytes.len() as u64));
    }
    Ok(Some(bytes))
}

fn import_error(file: &str, line: u64, column: impl Into<String>, reason: String) -> Error {
    Error::Import {
        file: file.to_owned(),
        line,
        column: column.into(),
        reason,
    }
}

/// A reason with the refused value in front (`"abc" is not a whole number`).
fn with_value(value: &str, reason: &str) -> String {
    if value.is_empty() {
        reason.to_owned()
    } else {
        format!("{value:?} {reason}")
    }
}

/// Check and parse one table file.
fn parse_table(schema: &TableSchema, file: &str, bytes: &[u8]) -> Result<Vec<Row>> {
    // Spreadsheets often save UTF-8 with a byte-order mark; it is not data.
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    if let Err(e) = std::str::from_utf8(bytes) {
        let at = e.valid_up_to();
        let place = locate(bytes, at);
        return Err(import_error(
            file,
            place.record_line,
            column_label(bytes, place.record, place.field),
            format!(
                "is not UTF-8 (byte 0x{:02X} at byte offset {at}); save the file as UTF-8",
                bytes[at]
            ),
        ));
    }
    // The csv crate takes a quote left open at the end of the file as a value
    // running to the end; that is a cut-short file, not data.
    let end = locate(bytes, bytes.len());
    if let Some(quote_line) = end.open_quote {
        return Err(import_error(
            file,
            quote_line,
            column_label(bytes, end.record, end.field),
            "a quoted value that starts on this line is never closed; the file may be cut short"
                .to_owned(),
        ));
    }

    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(false)
        .from_reader(bytes);
    let mut record = csv::StringRecord::new();
    let header: Vec<String> = match reader.read_record(&mut record) {
        Ok(true) => record.iter().map(str::to_owned).collect(),
        Ok(false) => {
            return Err(import_error(
                file,
                1,
                "1",
                format!(
                    "the file is empty; expected a header line: {}",
                    schema.column_list()
                ),
            ));
        }
        Err(e) => return Err(csv_error(file, &e, &[])),
    };
    let header_line = record.position().map_or(1, csv::Position::line);
    let columns = header_columns(schema, file, header_line, &header)?;
    let id_column = schema.index("id").unwrap_or_default();

    let mut first_line_of_id: HashMap<String, u64> = HashMap::new();
    let mut rows = Vec::new();
    loop {
        match reader.read_record(&mut record) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(file, &e, &header)),
        }
        let line = record.position().map_or(0, csv::Position::line);
        let mut values = vec![Value::Null; schema.fields.len()];
        for (cell, &i) in record.iter().zip(&columns) {
            let field = &schema.fields[i];
            let value = field.parse_cell(cell).map_err(|reason| {
                import_error(file, line, &field.name, with_value(cell, &reason))
            })?;
            values[i] = value;
        }
        if let Value::Text(id) = &values[id_column]
            && let Some(first) = first_line_of_id.insert(id.clone(), line)
        {
            return Err(import_error(
                file,
                line,
                &schema.fields[id_column].name,
                format!("{id:?} is also the id of the row on line {first}; ids must be unique"),
            ));
        }
        rows.push(Row { line, values });
    }
    Ok(rows)
}

/// For each header position, the schema column it holds. The header must name
/// every column once and nothing else; the order is free.
fn header_columns(
    schema: &TableSchema,
    file: &str,
    line: u64,
    header: &[String],
) -> Result<Vec<usize>> {
    let mut columns = Vec::with_capacity(header.len());
    for (n, name) in header.iter().enumerate() {
        let Some(i) = schema.index(name) else {
            let (column, problem) = if name.is_empty() {
                ((n + 1).to_string(), "has no name")
            } else {
                (name.clone(), "is not a column of this table")
            };
            return Err(import_error(
                file,
                line,
                column,
                format!(
                    "{problem}; the columns of {} are {}",
                    schema.name,
                    schema.column_list()
                ),
            ));
        };
        if columns.contains(&i) {
            return Err(import_error(
                file,
                line,
                name.as_str(),
                "appears twice in the header".to_owned(),
            ));
        }
        columns.push(i);
    }
    if let Some(missing) = schema.fields.iter().find(|f| !header.contains(&f.name)) {
        return Err(import_error(
            file,
            line,
            &missing.name,
            "is missing from the header".to_owned(),
        ));
    }
    Ok(columns)
}

/// A CSV reader error as an import error.
fn csv_error(file: &str, e: &csv::Error, header: &[String]) -> Error {
    let line = e.position().map_or(0, csv::Position::line);
    match e.kind() {
        csv::ErrorKind::UnequalLengths {
            pos,
            expected_len,
            len,
        } => {
            let line = pos.as_ref().map_or(line, csv::Position::line);
            // Name the first missing column, or number the first extra one.
            let column = usize::try_from(*len)
                .ok()
                .and_then(|n| header.get(n).cloned())
                .unwrap_or_else(|| (expected_len + 1).to_string());
            import_error(
                file,
                line,
                column,
                format!("the row has {len} values but the header has {expected_len}"),
            )
        }
        _ => import_error(file, line, "1", e.to_string()),
    }
}

/// Where a byte offset falls in a CSV file.
#[derive(Debug, Clone, Copy)]
struct Place {
    /// Line on which the record holding the offset starts.
    record_line: u64,
    /// 0-based record index (0 = the header).
    record: usize,
    /// 0-based field index within the record.
    field: usize,
    /// Line of the opening quote when the offset is inside a quoted value.
    open_quote: Option<u64>,
}

/// Scan `bytes[..end]` the way the csv crate reads (RFC 4180 quoting, doubled
/// quotes, CR, LF or CRLF ends a record, blank lines skipped, lines counted by
/// LF) and say where `end` falls.
fn locate(bytes: &[u8], end: usize) -> Place {
    #[derive(Clone, Copy, PartialEq)]
    enum State {
        RecordStart,
        FieldStart,
        Unquoted,
        Quoted,
        QuoteInQuoted,
    }
    let is_end = |b: u8| b == b'\n' || b == b'\r';
    let mut line = 1;
    let mut quote_line = 1;
    let mut records = 0;
    let mut place = Place {
        record_line: 1,
        record: 0,
        field: 0,
        open_quote: None,
    };
    let mut state = State::RecordStart;
    for &b in &bytes[..end] {
        if state == State::RecordStart && !is_end(b) {
            place.record_line = line;
            place.record = records;
            place.field = 0;
            records += 1;
            state = State::FieldStart;
        }
        state = match state {
            State::RecordStart => State::RecordStart,
            State::FieldStart | State::QuoteInQuoted if b == b'"' => {
                if state == State::FieldStart {
                    quote_line = line;
                }
                State::Quoted
            }
            State::Quoted if b == b'"' => State::QuoteInQuoted,
            State::Quoted => State::Quoted,
            _ if b == b',' => {
                place.field += 1;
                State::FieldStart
            }
            _ if is_end(b) => State::RecordStart,
            _ => State::Unquoted,
        };
        if b == b'\n' {
            line += 1;
        }
    }
    if state == State::RecordStart {
        // The offset starts a new record.
        place.record_line = line;
        place.record = records;
        place.field = 0;
    }
    if state == State::Quoted {
        place.open_quote = Some(quote_line);
    }
    place
}

/// The name of a column for a message: the header's name for a data row, the
/// 1-based number within the header itself or past its end.
fn column_label(bytes: &[u8], record: usize, field: usize) -> String {
    let number = (field + 1).to_string();
    if record == 0 {
        return number;
    }
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(bytes);
    let mut header = csv::ByteRecord::new();
    match reader.read_byte_record(&mut header) {
        Ok(true) => header
            .get(field)
            .map_or(number, |name| String::from_utf8_lossy(name).into_owned()),
        _ => number,
    }
}

/// Insert a file's rows, naming the line of a row the database refuses.
fn insert_table(w: &mut Writer<'_>, table: TableFile) -> Result<()> {
    let TableFile { schema, file, rows } = table;
    for row in parents_first(schema, rows) {
        w.insert_values(schema, row.values).map_err(|e| match e {
            Error::InvalidValue {
                field,
                value,
                reason,
                ..
            } => import_error(&file, row.line, field, with_value(&value, &reason)),
            other => other,
        })?;
    }
    Ok(())
}

/// Reorder rows of a table that refers to itself (a tagged leaf replacing
/// another) so that a referenced row comes before the rows that refer to it;
/// other tables keep the file's order. Rows in a reference cycle stay in the
/// file's order and the write path refuses the first.
fn parents_first(schema: &TableSchema, rows: Vec<Row>) -> Vec<Row> {
    let self_refs: Vec<usize> = schema
        .foreign_keys
        .iter()
        .filter(|fk| fk.resource == schema.name)
        .filter_map(|fk| schema.index(&fk.field))
        .collect();
    if self_refs.is_empty() || rows.len() < 2 {
        return rows;
    }
    let id_column = schema.index("id").unwrap_or_default();
    let by_id: HashMap<&str, usize> = rows
        .iter()
        .enumerate()
        .filter_map(|(n, r)| match &r.values[id_column] {
            Value::Text(id) => Some((id.as_str(), n)),
            _ => None,
        })
        .collect();
    let parents = |n: usize| -> Vec<usize> {
        self_refs
            .iter()
            .filter_map(|&c| match &rows[n].values[c] {
                Value::Text(target) => by_id.get(target.as_str()).copied(),
                _ => None,
            })
            .filter(|&p| p != n)
            .collect()
    };
    // Depth-first, parents before children, with an explicit stack so that a
    // long chain of replacements cannot overflow the call stack.
    #[derive(Clone, Copy, PartialEq)]
    enum Mark {
        New,
        Open,
        Done,
    }
    let mut mark = vec![Mark::New; rows.len()];
    let mut order = Vec::with_capacity(rows.len());
    for start in 0..rows.len() {
        if mark[start] != Mark::New {
            continue;
        }
        mark[start] = Mark::Open;
        let mut stack = vec![(start, 0)];
        while let Some(&(n, next)) = stack.last() {
            let ps = parents(n);
            if let Some(&p) = ps.get(next) {
                if let Some(top) = stack.last_mut() {
                    top.1 += 1;
                }
                if mark[p] == Mark::New {
                    mark[p] = Mark::Open;
                    stack.push((p, 0));
                }
            } else {
                mark[n] = Mark::Done;
                order.push(n);
                stack.pop();
            }
        }
    }
    let mut slots: Vec<Option<Row>> = rows.into_iter().map(Some).collect();
    order.into_iter().filter_map(|n| slots[n].take()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    // Positions follow RFC 4180 quoting; lines are counted by LF like the csv crate.
    #[test]
    fn locate_finds_record_field_and_open_quote() {
        let text = b"a,b\n1,\"x\ny\"\n2,\"open\nstill";
        // Offset of 'y' (inside the quoted value of record 1 that began on line 2).
        let y = text.iter().position(|&b| b == b'y').unwrap_or_default();
        let p = locate(text, y);
        assert_eq!((p.record_line, p.record, p.field), (2, 1, 1));
        assert_eq!(p.open_quote, Some(2));
        let end = locate(text, text.len());
        assert_eq!((end.record_line, end.record, end.field), (4, 2, 1));
        assert_eq!(end.open_quote, Some(4));
        // A doubled quote does not close the value; a lone one does (RFC 4180 §2.7).
        assert_eq!(locate(b"a\n\"x\"\"", 6).open_quote, Some(2));
        assert_eq!(locate(b"a\n\"x\"\"\"", 7).open_quote, None);
        // A quote inside an unquoted value is literal (csv crate behaviour).
        assert_eq!(locate(b"a\nx\"y", 5).open_quote, None);
    }

    #[test]
    fn parents_come_first() {
        let schema = tables::get("tagged_leaf").expect("tagged_leaf schema");
        let id = |n: u8| format!("0190a000-0000-7000-8000-0000000000{n:02}");
        let row = |n: u8, parent: Option<u8>| {
            let mut values = vec![Value::Null; schema.fields.len()];
            values[0] = Value::Text(id(n));
            let c = schema.index("replaces_leaf_id").expect("column");
            values[c] = parent.map_or(Value::Null, |p| Value::Text(id(p)));
            Row {
                line: u64::from(n),
                values,
            }
        };
        // 3 replaces 2, which replaces 1; the file lists them backwards.
        let rows = vec![row(3, Some(2)), row(2, Some(1)), row(1, None)];
        let lines: Vec<u64> = parents_first(schema, rows).iter().map(|r| r.line).collect();
        assert_eq!(lines, [1, 2, 3]);
    }
}
