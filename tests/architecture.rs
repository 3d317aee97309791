//! The architecture as tests: what each crate may depend on, what the user's
//! binary may offer, and that the repository cites nothing outside itself.
//! The crates' dependency arrows are kept by the compiler; these tests keep
//! what the compiler cannot see (a dependency that is allowed but must not be
//! there, a hidden command, a comment pointing out of the repository).

use std::collections::BTreeSet;
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
