//! The invariants of ARCHITECTURE.md that are absences, checked over the source tree (the
//! ones marked "(grep)" there). Each reads the non-test part of the files concerned (the
//! text before a file's first `#[cfg(test)]`).

use std::path::{Path, PathBuf};

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .unwrap()
        .to_path_buf()
}

/// Every `.rs` file under `dir`, with its non-test text.
fn sources(dir: &Path) -> Vec<(PathBuf, String)> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else if p.extension().is_some_and(|x| x == "rs") {
                let text = std::fs::read_to_string(&p).unwrap();
                let code = match text.find("#[cfg(test)]") {
                    Some(i) => text[..i].to_string(),
                    None => text,
                };
                out.push((p, code));
            }
        }
    }
    assert!(!out.is_empty(), "no sources under {}", dir.display());
    out
}

fn offenders(
    files: &[(PathBuf, String)],
    needles: &[&str],
    skip: impl Fn(&Path) -> bool,
) -> Vec<String> {
    let mut bad = Vec::new();
    for (p, code) in files {
        if skip(p) {
            continue;
        }
        for (n, line) in code.lines().enumerate() {
            let t = line.trim_start();
            if t.starts_with("//") {
                continue;
            }
            if let Some(needle) = needles.iter().find(|w| line.contains(*w)) {
                bad.push(format!(
                    "{}:{}: {needle:?} in {}",
                    p.display(),
                    n + 1,
                    line.trim()
                ));
            }
        }
    }
    bad
}

#[test]
fn nothing_but_the_store_touches_sql() {
    let files = sources(&root().join("coordinator/src"));
    let store = root().join("coordinator/src/store");
    let bad = offenders(
        &files,
        &[
            "SELECT ",
            "INSERT INTO",
            "DELETE FROM",
            "sqlx::query",
            "UPDATE units",
            "UPDATE workers",
            "UPDATE reports",
            "UPDATE leases",
        ],
        |p| p.starts_with(&store),
    );
    assert!(
        bad.is_empty(),
        "SQL outside coordinator/src/store:\n{}",
        bad.join("\n")
    );
}

#[test]
fn the_kernel_and_the_shared_types_do_no_io_and_read_no_clock() {
    let files = sources(&root().join("common/src"));
    let bad = offenders(
        &files,
        &[
            "reqwest",
            "sqlx",
            "std::fs",
            "std::net",
            "SystemTime",
            "Instant::now",
            "tokio",
        ],
        |_| false,
    );
    assert!(
        bad.is_empty(),
        "I/O or a clock in common/src:\n{}",
        bad.join("\n")
    );
}

#[test]
fn the_unit_life_is_defined_in_one_place() {
    let files = sources(&root().join("coordinator/src"));
    let home = root().join("coordinator/src/lifecycle.rs");
    let bad = offenders(
        &files,
        &[
            "enum UnitState",
            "enum Verdict",
            "fn decide(",
            "fn proven_wrong(",
        ],
        |p| p == home,
    );
    assert!(
        bad.is_empty(),
        "unit states or the agreement rule outside lifecycle.rs:\n{}",
        bad.join("\n")
    );
    let life = std::fs::read_to_string(&home).unwrap();
    assert!(life.contains("pub enum UnitState") && life.contains("pub fn decide("));
    // The rule it replaced is gone for good.
    assert!(!root().join("coordinator/src/quorum.rs").exists());
}

/// Every text file of the repository that a reader sees (code, documents, pages, SQL,
/// settings), skipping build output and version control.
fn tree_texts() -> Vec<(PathBuf, String)> {
    let mut out = Vec::new();
    let mut stack = vec![root()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            let name = p.file_name().unwrap().to_string_lossy().to_string();
            if p.is_dir() {
                if !name.starts_with('.') && name != "target" {
                    stack.push(p);
                }
            } else if [
                "rs", "md", "html", "js", "sql", "toml", "yaml", "sh", "service",
            ]
            .iter()
            .any(|x| p.extension().is_some_and(|e| e == *x))
            {
                out.push((p.clone(), std::fs::read_to_string(&p).unwrap_or_default()));
            }
        }
    }
    out
}

/// Whether `line` holds `word` (any case) not inside a longer word: letters on either side
/// make it part of another word ("spending"); `_` and digits do not ("pending_gap" counts).
fn has_word(line: &str, word: &str) -> bool {
    let low = line.to_lowercase();
    low.match_indices(word).any(|(i, _)| {
        let before = low[..i].chars().next_back();
        let after = low[i + word.len()..].chars().next();
        !before.is_some_and(char::is_alphabetic) && !after.is_some_and(char::is_alphabetic)
    })
}

/// The words docs/vocabulary.md says this project does not use stay out of every file,
/// except that list itself and this test.
#[test]
fn words_the_vocabulary_avoids_stay_out() {
    let avoid = ["quorum", "workunit", "work unit", "pending"];
    let skip = [
        root().join("docs/vocabulary.md"),
        root().join("coordinator/tests/invariants.rs"),
    ];
    let mut bad = Vec::new();
    for (p, text) in tree_texts() {
        if skip.contains(&p) {
            continue;
        }
        for (n, line) in text.lines().enumerate() {
            if let Some(w) = avoid.iter().find(|w| has_word(line, w)) {
                bad.push(format!("{}:{}: {w:?}: {}", p.display(), n + 1, line.trim()));
            }
        }
    }
    assert!(
        bad.is_empty(),
        "words to avoid (docs/vocabulary.md):\n{}",
        bad.join("\n")
    );
}

/// Comments and documents cite documents inside the repository: the mathematics is
/// docs/method.md and the words docs/vocabulary.md.
#[test]
fn cited_documents_are_in_the_repository() {
    let mut bad = Vec::new();
    for (p, text) in tree_texts() {
        if p == root().join("coordinator/tests/invariants.rs") {
            continue;
        }
        for (n, line) in text.lines().enumerate() {
            for w in ["METHOD.md", "CONVENTIONS.md", "../shared"] {
                if line.contains(w) {
                    bad.push(format!("{}:{}: {w}: {}", p.display(), n + 1, line.trim()));
                }
            }
        }
    }
    assert!(
        bad.is_empty(),
        "documents outside the repository cited:\n{}",
        bad.join("\n")
    );
    for doc in [
        "docs/method.md",
        "docs/vocabulary.md",
        "ARCHITECTURE.md",
        "DEVELOPERS.md",
    ] {
        assert!(root().join(doc).is_file(), "{doc} missing");
    }
}

/// `rust-version` in Cargo.toml is the one the build really needs: the newest that any
/// dependency declares (cargo metadata). The code's own use of the standard library is held
/// to it by clippy's `incompatible_msrv` lint, which reads the same field (CI runs clippy
/// with `-D warnings`).
#[test]
fn rust_version_is_what_the_dependencies_need() {
    let rustc = std::process::Command::new("rustc")
        .arg("-vV")
        .output()
        .unwrap();
    let host = String::from_utf8_lossy(&rustc.stdout)
        .lines()
        .find_map(|l| l.strip_prefix("host: ").map(str::to_string))
        .expect("rustc -vV names the host");
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    let out = std::process::Command::new(cargo)
        .args([
            "metadata",
            "--format-version",
            "1",
            "--filter-platform",
            &host,
        ])
        .current_dir(root())
        .output()
        .expect("cargo metadata runs");
    assert!(
        out.status.success(),
        "cargo metadata failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let m: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let version = |s: &str| -> (u64, u64) {
        let mut it = s.split('.').map(|x| x.parse::<u64>().unwrap());
        (it.next().unwrap(), it.next().unwrap_or(0))
    };
    let members: Vec<&str> = m["workspace_members"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap())
        .collect();
    let in_graph: std::collections::HashSet<&str> = m["resolve"]["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| n["id"].as_str().unwrap())
        .collect();
    let mut need = ((0, 0), String::new());
    let mut ours = None;
    for p in m["packages"].as_array().unwrap() {
        let id = p["id"].as_str().unwrap();
        let Some(rv) = p["rust_version"].as_str() else {
            continue;
        };
        if members.contains(&id) {
            ours = Some(version(rv));
        } else if in_graph.contains(id) && version(rv) > need.0 {
            need = (version(rv), p["name"].as_str().unwrap().to_string());
        }
    }
    let ours = ours.expect("the workspace declares rust-version");
    assert_eq!(
        ours, need.0,
        "Cargo.toml says rust-version {ours:?}; the dependencies need {:?} (for {})",
        need.0, need.1
    );
}
