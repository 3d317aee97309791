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

/// The string literals of a Rust source (plain and raw; comments and char
/// literals skipped), with a line continuation (`\` at the end of a line)
/// read as nothing and other escapes as the character they stand for.
fn string_literals(source: &str) -> Vec<String> {
    let s: Vec<char> = source.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < s.len() {
        match s[i] {
            '/' if s.get(i + 1) == Some(&'/') => {
                while i < s.len() && s[i] != '\n' {
                    i += 1;
                }
            }
            '/' if s.get(i + 1) == Some(&'*') => {
                i += 2;
                while i + 1 < s.len() && !(s[i] == '*' && s[i + 1] == '/') {
                    i += 1;
                }
                i += 2;
            }
            '\'' => {
                // A char literal ('x', '\n', '\'', '"') or a lifetime ('a).
                if s.get(i + 1) == Some(&'\\') {
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
            }
            'r' if (s.get(i + 1) == Some(&'"') || s.get(i + 1) == Some(&'#'))
                && (i == 0 || !(s[i - 1].is_alphanumeric() || s[i - 1] == '_')) =>
            {
                let mut j = i + 1;
                let mut hashes = 0;
                while s.get(j) == Some(&'#') {
                    hashes += 1;
                    j += 1;
                }
                if s.get(j) != Some(&'"') {
                    i += 1;
                    continue;
                }
                j += 1;
                let start = j;
                loop {
                    if j >= s.len() {
                        break;
                    }
                    if s[j] == '"' && (0..hashes).all(|h| s.get(j + 1 + h) == Some(&'#')) {
                        break;
                    }
                    j += 1;
                }
                out.push(s[start..j.min(s.len())].iter().collect());
                i = j + 1 + hashes;
            }
            '"' => {
                let mut text = String::new();
                i += 1;
                while i < s.len() && s[i] != '"' {
                    if s[i] == '\\' {
                        i += 1;
                        match s.get(i) {
                            Some('\n') => {
                                while i + 1 < s.len() && s[i + 1].is_whitespace() {
                                    i += 1;
                                }
                            }
                            Some('n') => text.push('\n'),
                            Some('t') => text.push('\t'),
                            Some(&c) => text.push(c),
                            None => {}
                        }
                    } else {
                        text.push(s[i]);
                    }
                    i += 1;
                }
                out.push(text);
                i += 1;
            }
            _ => i += 1,
        }
    }
    out
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
    let literals = string_literals(
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

/// The product's Rust sources (not the tests, the test kit or the benchmark).
fn product_sources() -> Vec<PathBuf> {
    let mut out = Vec::new();
    let roots = [
        "crates/core/src",
        "crates/ops/src",
        "crates/server/src",
        "crates/cli/src",
        "src-tauri/src",
    ];
    let mut stack: Vec<PathBuf> = roots.iter().map(|r| repo_root().join(r)).collect();
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                stack.push(path);
            } else if path.extension().is_some_and(|e| e == "rs") {
                out.push(path);
            }
        }
    }
    out.sort();
    out
}

#[test]
fn only_the_schema_lists_a_records_columns() {
    let tables = stored_tables();
    let allowed = [
        repo_root().join("crates/core/src/store"),
        repo_root().join("crates/core/src/model"),
    ];
    let mut queries = 0;
    let mut lists = Vec::new();
    for path in product_sources() {
        if allowed.iter().any(|a| path.starts_with(a)) {
            continue;
        }
        let shown = path.strip_prefix(repo_root()).unwrap_or(&path).display();
        let source = std::fs::read_to_string(&path).unwrap();
        for literal in string_literals(&source) {
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
        queries > 20,
        "only {queries} queries of stored tables found"
    );
    assert!(
        lists.is_empty(),
        "columns of stored tables listed outside their schema (read records through \
         the generated readers of crates/core/src/model):\n{}",
        lists.join("\n")
    );
}
