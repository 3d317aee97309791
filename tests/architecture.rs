//! The architecture as tests: what each crate may depend on, what the user's
//! binary may offer, and that the repository cites nothing outside itself.
//! The crates' dependency arrows are kept by the compiler; these tests keep
//! what the compiler cannot see (a dependency that is allowed but must not be
//! there, a hidden command, a comment pointing out of the repository).

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::Command;

use crate::util::repo_root;

/// The packages `package` depends on to build and run (normal and build
/// edges, no dev-dependencies), as `cargo tree` resolves them.
fn dependencies(package: &str) -> BTreeSet<String> {
    let out = Command::new(env!("CARGO"))
        .current_dir(repo_root())
        .args(["tree", "--locked", "-p", package, "-e", "normal,build"])
        .args(["--prefix", "none", "--format", "{p}"])
        .output()
        .expect("cargo tree runs");
    assert!(
        out.status.success(),
        "cargo tree -p {package}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .filter_map(|l| l.split_whitespace().next())
        .map(str::to_owned)
        .collect()
}

#[test]
fn the_tablet_app_links_the_operation_set_and_no_http_server() {
    let deps = dependencies("fieldcage-tablet");
    assert!(deps.contains("fieldcage-ops"), "{deps:?}");
    for absent in [
        "axum",
        "hyper",
        "hyper-util",
        "rust-embed",
        "fieldcage-server",
        "fieldcage-testkit",
        "fieldcage-bench",
    ] {
        assert!(!deps.contains(absent), "the tablet app depends on {absent}");
    }
}

#[test]
fn the_core_knows_nothing_of_transports_and_the_product_nothing_of_tests() {
    let core = dependencies("fieldcage-core");
    for absent in ["axum", "hyper", "tokio", "rust-embed", "clap", "tauri"] {
        assert!(!core.contains(absent), "fieldcage-core depends on {absent}");
    }
    let ops = dependencies("fieldcage-ops");
    for absent in ["axum", "hyper", "rust-embed", "tauri"] {
        assert!(!ops.contains(absent), "fieldcage-ops depends on {absent}");
    }
    let cli = dependencies("fieldcage");
    for absent in ["fieldcage-testkit", "fieldcage-bench"] {
        assert!(
            !cli.contains(absent),
            "the fieldcage binary depends on {absent}"
        );
    }
}

#[test]
fn the_users_binary_offers_no_test_or_benchmark_command() {
    let help = Command::new(env!("CARGO_BIN_EXE_fieldcage"))
        .arg("--help")
        .output()
        .unwrap();
    assert!(help.status.success());
    let help = String::from_utf8_lossy(&help.stdout);
    assert!(help.contains("serve"), "{help}");
    for command in ["crash-writer", "analysis-probe", "bench-stage", "bench"] {
        assert!(
            !help.split_whitespace().any(|w| w == command),
            "fieldcage --help lists {command}:\n{help}"
        );
        let out = Command::new(env!("CARGO_BIN_EXE_fieldcage"))
            .arg(command)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "fieldcage {command}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("unrecognized subcommand"), "{command}: {err}");
    }
}

/// Every text file of the repository that code or people read: sources,
/// tests, the UI, scripts and the documentation.
fn repository_texts() -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![repo_root().to_path_buf()];
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).unwrap() {
            let path = entry.unwrap().path();
            let name = path.file_name().unwrap().to_string_lossy().into_owned();
            if path.is_dir() {
                let skipped = [
                    "target",
                    "node_modules",
                    ".git",
                    ".venv",
                    ".tools",
                    "test-artifacts",
                    "corpus",
                    "artifacts",
                ];
                if !skipped.contains(&name.as_str()) {
                    stack.push(path);
                }
            } else if [".rs", ".js", ".mjs", ".py", ".sh", ".md", ".toml", ".html"]
                .iter()
                .any(|ext| name.ends_with(ext))
            {
                out.push(path);
            }
        }
    }
    out.sort();
    out
}

#[test]
fn the_repository_cites_nothing_outside_itself() {
    let methods = std::fs::read_to_string(repo_root().join("docs/methods.md")).unwrap();
    // The section numbers docs/methods.md has: "## 4. …" and "### 10.1 …".
    let sections: BTreeSet<String> = methods
        .lines()
        .filter(|l| l.starts_with("## ") || l.starts_with("### "))
        .filter_map(|l| l.split_whitespace().nth(1))
        .map(|n| n.trim_end_matches('.').to_owned())
        .collect();
    assert!(
        sections.contains("4") && sections.contains("10.1"),
        "{sections:?}"
    );
    let cite = regex::Regex::new(r"docs/methods\.md (?:§|section )(\d+(?:\.\d+)?)").unwrap();
    let mut cited = 0;
    for path in repository_texts() {
        let text = std::fs::read_to_string(&path).unwrap_or_default();
        let shown = path.strip_prefix(repo_root()).unwrap_or(&path).display();
        // Spelled in two parts so that this file does not name them itself.
        for outside in ["REFERENCES", "DESIGN", "STYLE"].map(|n| format!("{n}.md")) {
            assert!(
                !text.contains(&outside),
                "{shown} cites {outside}, which is not in the repository; cite docs/methods.md"
            );
        }
        for m in cite.captures_iter(&text) {
            cited += 1;
            assert!(
                sections.contains(&m[1]),
                "{shown} cites docs/methods.md §{}, which has no such section",
                &m[1]
            );
        }
    }
    assert!(
        cited > 20,
        "only {cited} citations of docs/methods.md found"
    );
}

#[test]
fn the_map_in_developers_md_names_every_crate() {
    let guide = std::fs::read_to_string(repo_root().join("DEVELOPERS.md")).unwrap();
    let crates = std::fs::read_dir(repo_root().join("crates")).unwrap();
    for entry in crates {
        let name = entry.unwrap().file_name().to_string_lossy().into_owned();
        let row = format!("| `crates/{name}/");
        assert!(
            guide.contains(&row),
            "DEVELOPERS.md's map has no row {row}…"
        );
    }
    assert!(Path::new(&repo_root().join("src-tauri/Cargo.toml")).exists());
    assert!(
        guide.contains("| `src-tauri/"),
        "DEVELOPERS.md's map has no src-tauri row"
    );
}

/// The string literals of a Rust source, each with the 1-based line of every
/// character: `"…"` (with escapes), raw `r"…"` / `r#"…"#`, byte and C
/// strings. Comments (`//` to the end of the line, `/* … */` nested) are
/// skipped, and so are char literals (`'"'`) and lifetimes, so that none of
/// them starts a string. A small lexer of its own: the test needs only the
/// literals.
fn string_literals(source: &str) -> Vec<Vec<(usize, char)>> {
    let s: Vec<char> = source.chars().collect();
    let word = |c: char| c.is_alphanumeric() || c == '_';
    let mut out = Vec::new();
    let mut line = 1;
    let mut i = 0;
    // Take the literal whose text starts at `i` and ends at a `"` followed
    // by `hashes` `#` (escapes only when `escapes`); returns the index after it.
    let mut take = |mut i: usize, hashes: usize, escapes: bool, line: &mut usize| {
        let mut text = Vec::new();
        while i < s.len() {
            let c = s[i];
            if c == '"' && (1..=hashes).all(|k| s.get(i + k) == Some(&'#')) {
                i += 1 + hashes;
                break;
            }
            if escapes && c == '\\' && i + 1 < s.len() {
                // The escaped character stays in the text (so `\"` does not
                // end the literal); a `\` before a line break continues it.
                text.push((*line, c));
                i += 1;
            }
            *line += usize::from(s[i] == '\n');
            text.push((*line, s[i]));
            i += 1;
        }
        out.push(text);
        i
    };
    while i < s.len() {
        let c = s[i];
        let next = s.get(i + 1).copied();
        if c == '\n' {
            line += 1;
            i += 1;
        } else if c == '/' && next == Some('/') {
            while i < s.len() && s[i] != '\n' {
                i += 1;
            }
        } else if c == '/' && next == Some('*') {
            let mut depth = 0;
            while i < s.len() {
                if s[i] == '/' && s.get(i + 1) == Some(&'*') {
                    depth += 1;
                    i += 2;
                } else if s[i] == '*' && s.get(i + 1) == Some(&'/') {
                    depth -= 1;
                    i += 2;
                    if depth == 0 {
                        break;
                    }
                } else {
                    line += usize::from(s[i] == '\n');
                    i += 1;
                }
            }
        } else if c == '\'' {
            // A char literal ('x', '\n', '\'', '"'), or a lifetime ('a).
            if next == Some('\\') {
                i += 3;
                while i < s.len() && s[i] != '\'' {
                    i += 1;
                }
                i += 1;
            } else if s.get(i + 2) == Some(&'\'') {
                i += 3;
            } else {
                i += 1;
            }
        } else if c == '"' {
            i = take(i + 1, 0, true, &mut line);
        } else if word(c) {
            // A whole word at once (identifier, keyword, number), so that
            // only a word `r`, `br` or `cr` can open a raw string and `r#type`
            // does not.
            let start = i;
            while i < s.len() && word(s[i]) {
                i += 1;
            }
            let w: String = s[start..i].iter().collect();
            if matches!(w.as_str(), "r" | "br" | "cr") {
                let mut j = i;
                while s.get(j) == Some(&'#') {
                    j += 1;
                }
                if s.get(j) == Some(&'"') {
                    i = take(j + 1, j - i, false, &mut line);
                }
            }
        } else {
            i += 1;
        }
    }
    out
}

/// The text of each string literal of a Rust source.
fn literal_texts(source: &str) -> Vec<String> {
    string_literals(source)
        .into_iter()
        .map(|l| l.into_iter().map(|(_, c)| c).collect())
        .collect()
}

/// Where `text` holds one of the words of SQL that write (`INSERT`,
/// `UPDATE`, `DELETE`, `REPLACE`: upper case, as the project writes its SQL,
/// and as whole words): the line of each.
fn sql_writes(text: &[(usize, char)]) -> Vec<(usize, &'static str)> {
    let mut found = Vec::new();
    let word = |c: char| c.is_alphanumeric() || c == '_';
    for keyword in ["INSERT", "UPDATE", "DELETE", "REPLACE"] {
        let k: Vec<char> = keyword.chars().collect();
        for at in 0..text.len() {
            let here = text[at..].iter().map(|(_, c)| *c).take(k.len());
            let bounded_before = at == 0 || !word(text[at - 1].1);
            let bounded_after = text.get(at + k.len()).is_none_or(|(_, c)| !word(*c));
            if bounded_before && bounded_after && here.eq(k.iter().copied()) {
                found.push((text[at].0, keyword));
            }
        }
    }
    found.sort();
    found
}

/// The product's Rust sources outside the store: every crate that ships in
/// the user's binary or the tablet app, with their `#[cfg(test)]` modules
/// (which set up their cases through the store as well). Not the tests, the
/// test kit, the benchmark or the power-cut VFS, which never ship.
fn product_sources_outside_the_store() -> Vec<PathBuf> {
    let roots = [
        "crates/core/src/",
        "crates/ops/src/",
        "crates/server/src/",
        "crates/cli/src/",
        "src-tauri/src/",
    ];
    repository_texts()
        .into_iter()
        .filter(|p| p.extension().is_some_and(|e| e == "rs"))
        .filter(|p| {
            let rel = p.strip_prefix(repo_root()).unwrap().to_string_lossy();
            let rel = rel.replace('\\', "/");
            roots.iter().any(|r| rel.starts_with(r)) && !rel.starts_with("crates/core/src/store/")
        })
        .collect()
}

#[test]
fn the_sql_lexer_finds_writes_in_literals_and_nothing_in_comments() {
    let source = r###"
// INSERT INTO a comment is not SQL
/* nor is UPDATE in a /* nested */ DELETE block comment */
let quote = '"'; let other = '\''; fn f<'a>(x: &'a str) {}
let read = "SELECT * FROM t WHERE op = 'update' AND UPDATED = 1";
let write = "SELECT 1; \
             DELETE FROM t";
let raw = r#"INSERT OR "REPLACE" INTO t"#;
let bytes = b"UPDATE t SET a = 1";
let escaped = "say \"hi\" // not a comment: REPLACE";
let r#type = 1; let bar = "INSERTS and _DELETE are other words";
"###;
    let literals = string_literals(source);
    let found: Vec<(usize, &str)> = literals.iter().flat_map(|l| sql_writes(l)).collect();
    assert_eq!(
        found,
        [
            (7, "DELETE"),
            (8, "INSERT"),
            (8, "REPLACE"),
            (9, "UPDATE"),
            (10, "REPLACE")
        ]
    );
    assert_eq!(literals.len(), 6, "{literals:?}");
}

#[test]
fn no_sql_writes_outside_the_store() {
    let sources = product_sources_outside_the_store();
    let shown = |p: &Path| p.strip_prefix(repo_root()).unwrap().display().to_string();
    let names: Vec<String> = sources.iter().map(|p| shown(p)).collect();
    for expected in [
        "crates/core/src/sync/apply.rs",
        "crates/ops/src/lib.rs",
        "crates/server/src/lib.rs",
        "crates/cli/src/main.rs",
        "src-tauri/src/lib.rs",
    ] {
        assert!(
            names.iter().any(|n| n == expected),
            "{expected} not scanned: {names:?}"
        );
    }
    assert!(
        !names
            .iter()
            .any(|n| n.starts_with("crates/core/src/store/")),
        "{names:?}"
    );
    let mut literals = 0;
    let mut writes = Vec::new();
    for path in &sources {
        let text = std::fs::read_to_string(path).unwrap();
        for literal in string_literals(&text) {
            literals += 1;
            for (line, keyword) in sql_writes(&literal) {
                writes.push(format!("{}:{line}: {keyword}", shown(path)));
            }
        }
    }
    assert!(literals > 1000, "only {literals} string literals found");
    assert!(
        writes.is_empty(),
        "SQL that writes outside crates/core/src/store/ (write through the store: \
         Store::write, or a function of store::sync_state for sync bookkeeping):\n{}",
        writes.join("\n")
    );
}

/// The stored tables and their columns, as `schemas/tables/*.json` define them.
fn stored_tables() -> BTreeMap<String, Vec<String>> {
    let dir = repo_root().join("schemas/tables");
    let mut tables = BTreeMap::new();
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        if !path.is_file() {
            continue;
        }
        let schema: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        let name = path.file_stem().unwrap().to_string_lossy().into_owned();
        let columns = schema["fields"]
            .as_array()
            .unwrap()
            .iter()
            .map(|f| f["name"].as_str().unwrap().to_owned())
            .collect();
        tables.insert(name, columns);
    }
    tables
}

/// SQL words, split off: names (with an optional `alias.` part), `(`, `)`,
/// `,` and `{…}` placeholders of a format string; everything else dropped.
fn sql_tokens(sql: &str) -> Vec<String> {
    let s: Vec<char> = sql.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < s.len() {
        let c = s[i];
        if c.is_alphabetic() || c == '_' {
            let start = i;
            while i < s.len() && (s[i].is_alphanumeric() || s[i] == '_' || s[i] == '.') {
                i += 1;
            }
            out.push(s[start..i].iter().collect());
        } else if c == '{' {
            let start = i;
            while i < s.len() && s[i] != '}' {
                i += 1;
            }
            i += 1;
            out.push(s[start..i.min(s.len())].iter().collect());
        } else if c == '\'' {
            // An SQL string: skip it.
            i += 1;
            while i < s.len() && s[i] != '\'' {
                i += 1;
            }
            i += 1;
        } else {
            if matches!(c, '(' | ')' | ',') {
                out.push(c.to_string());
            }
            i += 1;
        }
    }
    out
}

/// For every `SELECT … FROM …` in an SQL text (subqueries included), each
/// stored table it reads with the columns of that table its select list names.
fn selected_columns(
    sql: &str,
    tables: &BTreeMap<String, Vec<String>>,
) -> Vec<(String, BTreeSet<String>)> {
    let tokens = sql_tokens(sql);
    let is = |t: &str, word: &str| t.eq_ignore_ascii_case(word);
    let mut found = Vec::new();
    for start in (0..tokens.len()).filter(|&k| is(&tokens[k], "SELECT")) {
        // The select list runs to the FROM at the same depth.
        let mut depth = 0i32;
        let mut k = start + 1;
        let mut items: Vec<&str> = Vec::new();
        let mut from = None;
        while k < tokens.len() {
            let t = tokens[k].as_str();
            match t {
                "(" => depth += 1,
                ")" if depth == 0 => break,
                ")" => depth -= 1,
                _ if depth == 0 && is(t, "FROM") => {
                    from = Some(k);
                    break;
                }
                // Names inside a subquery belong to it; a name before `(`
                // is a function.
                _ if depth == 0 && tokens.get(k + 1).map(String::as_str) != Some("(") => {
                    let after_as = k > 0 && is(&tokens[k - 1], "AS");
                    if !after_as && t != "," {
                        items.push(t);
                    }
                }
                _ => {}
            }
            k += 1;
        }
        let Some(from) = from else { continue };
        // The FROM clause: `table [AS] [alias]`, joined by `,` or JOIN.
        let mut aliases: BTreeMap<String, String> = BTreeMap::new();
        let mut read: Vec<String> = Vec::new();
        let mut k = from + 1;
        let stop = [
            "WHERE", "GROUP", "ORDER", "LIMIT", "ON", "UNION", "HAVING", "USING",
        ];
        while k < tokens.len() {
            let t = tokens[k].as_str();
            if t == ")" || stop.iter().any(|w| is(t, w)) {
                break;
            }
            let joiner = ["JOIN", "CROSS", "INNER", "LEFT", "OUTER", "NATURAL", ","];
            if joiner.iter().any(|w| is(t, w)) || t == "(" {
                k += 1;
                continue;
            }
            let table = t.to_owned();
            let mut alias = table.clone();
            let mut next = k + 1;
            if tokens.get(next).is_some_and(|a| is(a, "AS")) {
                next += 1;
            }
            if let Some(a) = tokens.get(next)
                && a != ","
                && a != ")"
                && !stop.iter().chain(&joiner).any(|w| is(a, w))
            {
                alias = a.clone();
                next += 1;
            }
            aliases.insert(alias, table.clone());
            aliases.insert(table.clone(), table.clone());
            read.push(table);
            k = next;
        }
        let mut named: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
        for item in items {
            let (table, column) = match item.split_once('.') {
                Some((alias, column)) => (aliases.get(alias).cloned(), column),
                None if read.len() == 1 => (Some(read[0].clone()), item),
                None => (None, item),
            };
            let candidates: Vec<&String> = match &table {
                Some(t) => vec![t],
                None => read.iter().collect(),
            };
            for t in candidates {
                if tables
                    .get(t)
                    .is_some_and(|cols| cols.iter().any(|c| c == column))
                {
                    named
                        .entry(t.clone())
                        .or_default()
                        .insert(column.to_owned());
                }
            }
        }
        found.extend(named);
    }
    found
}

/// A text that is nothing but a list of three or more columns of one stored
/// table (`"id, visit_id, taxon_id"`, to be pasted into a query): the table.
fn column_list_of(text: &str, tables: &BTreeMap<String, Vec<String>>) -> Option<String> {
    let names: Vec<&str> = text.split(',').map(str::trim).collect();
    if names.len() < 3
        || names
            .iter()
            .any(|n| n.is_empty() || !n.chars().all(|c| c.is_ascii_alphanumeric() || c == '_'))
    {
        return None;
    }
    tables
        .iter()
        .find(|(_, cols)| names.iter().all(|n| cols.iter().any(|c| c == n)))
        .map(|(t, _)| t.clone())
}

/// What in one string literal lists three or more columns of a stored table.
fn column_lists_in(literal: &str, tables: &BTreeMap<String, Vec<String>>) -> Vec<String> {
    let mut out: Vec<String> = selected_columns(literal, tables)
        .into_iter()
        .filter(|(_, columns)| columns.len() >= 3)
        .map(|(table, columns)| {
            let columns: Vec<String> = columns.into_iter().collect();
            format!("{table}: {}", columns.join(", "))
        })
        .collect();
    if let Some(table) = column_list_of(literal, tables) {
        out.push(format!("{table}: {}", literal.trim()));
    }
    out
}

#[test]
fn the_column_list_scanner_finds_what_it_is_meant_to() {
    let tables = stored_tables();
    assert!(tables.len() >= 20, "{:?}", tables.keys());
    let literals = literal_texts(
        r####"
        // "SELECT id, kind, day FROM visit" in a comment is not a literal
        let a = "SELECT id, enclosure_id, kind, day \
                 FROM visit WHERE deleted = 0";
        let b = '"'; let c: &'static str = "SELECT id FROM visit";
        let d = r#"SELECT e.label, e.block_id, t.code, e.area_m2 FROM enclosure e JOIN treatment t ON t.id = e.id"#;
        let e = "id, visit_id, alive";
        let f = "SELECT visit_id, count(*) FROM census GROUP BY visit_id";
        let g = format!("SELECT {} FROM visit", x);
        let h = "SELECT label, (SELECT start_date, code, title FROM experiment) FROM enclosure";
        "####,
    );
    let found: Vec<Vec<String>> = literals
        .iter()
        .map(|l| column_lists_in(l, &tables))
        .collect();
    // The comment and the char literal '"' are not literals; seven are.
    assert_eq!(literals.len(), 7, "{literals:?}");
    assert_eq!(
        found[0],
        ["visit: day, enclosure_id, id, kind"],
        "{literals:?}"
    );
    assert!(found[1].is_empty(), "{found:?}");
    assert_eq!(found[2], ["enclosure: area_m2, block_id, label"]);
    assert_eq!(found[3], ["census: id, visit_id, alive"]);
    assert!(found[4].is_empty() && found[5].is_empty(), "{found:?}");
    assert_eq!(found[6], ["experiment: code, start_date, title"]);
}

#[test]
fn only_the_schema_lists_a_records_columns() {
    let tables = stored_tables();
    let mut queries = 0;
    let mut lists = Vec::new();
    for path in product_sources_outside_the_store() {
        if path.starts_with(repo_root().join("crates/core/src/model")) {
            continue;
        }
        let shown = path.strip_prefix(repo_root()).unwrap_or(&path).display();
        let source = std::fs::read_to_string(&path).unwrap();
        for literal in literal_texts(&source) {
            if !selected_columns(&literal, &tables).is_empty() {
                queries += 1;
            }
            for list in column_lists_in(&literal, &tables) {
                lists.push(format!("{shown}: {list}"));
            }
        }
    }
    // The scan sees the product's queries (a parser that sees none passes anything).
    assert!(
        queries > 10,
        "only {queries} queries of stored tables found"
    );
    assert!(
        lists.is_empty(),
        "columns of stored tables listed outside their schema (read records through \
         the generated readers of crates/core/src/model):\n{}",
        lists.join("\n")
    );
}
