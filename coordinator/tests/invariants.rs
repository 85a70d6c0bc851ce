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
