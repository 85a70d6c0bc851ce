//! The coordinator's command line as a new user meets it: `--help` for every command and clear,
//! non-zero refusals of wrong arguments. (Being an integration test of this package, it also
//! makes `cargo test --workspace` build the `cubehunt-coordinator` binary that the cross-crate
//! tests in `tests/` start.)

use std::process::Command;

fn coord(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cubehunt-coordinator"))
        .args(args)
        .output()
        .expect("run cubehunt-coordinator")
}

#[test]
fn every_command_has_help() {
    let top = coord(&["--help"]);
    assert!(top.status.success());
    let text = String::from_utf8_lossy(&top.stdout).to_string();
    for cmd in ["init", "serve", "campaign"] {
        assert!(text.contains(cmd), "top-level help lists {cmd}: {text}");
        let out = coord(&[cmd, "--help"]);
        assert!(out.status.success(), "{cmd} --help");
        assert!(!out.stdout.is_empty());
    }
}

#[test]
fn wrong_arguments_are_refused_with_a_message() {
    let out = coord(&["no-such-command"]);
    assert!(!out.status.success());
    assert!(!out.stderr.is_empty());
    // A data directory that does not exist is named in the error.
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("absent");
    let out = coord(&[
        "serve",
        "--data-dir",
        missing.to_str().unwrap(),
        "--listen",
        "127.0.0.1:0",
    ]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("absent"), "error names the directory: {err}");
}
