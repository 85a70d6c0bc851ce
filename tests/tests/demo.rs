//! `cubehunt-coordinator demo`, end to end, at a small bound: it must exit 0, show the
//! solutions and verified certificates, and leave with `--data-dir` a store that a separate
//! `audit` run passes.

use cubehunt_tests::{bin, run_cmd, s, serial};
use std::time::Duration;

#[test]
fn demo_runs_to_a_passing_audit_and_keeps_its_store() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("demo");
    let coord = bin("cubehunt-coordinator");
    let (code, out, err) = run_cmd(
        &coord,
        &s(&[
            "demo",
            "--data-dir",
            dir.to_str().unwrap(),
            "--bound",
            "1e5",
        ]),
        Duration::from_secs(300),
    )
    .unwrap();
    assert_eq!(code, 0, "demo failed:\n{out}\n{err}");
    // k = 3 has (1, 1, 1) and (4, 4, −5) (common knowledge, checked exactly by the kernel's tests).
    assert!(out.contains("k =   3: (-5, 4, 4)  (1, 1, 1)\n"), "{out}");
    let verified = out
        .lines()
        .filter(|l| l.starts_with("  k = ") && l.ends_with("verified"))
        .count();
    assert_eq!(verified, 7, "seven certificates verified:\n{out}");
    assert!(!out.contains("FAILED"), "{out}");
    assert!(out.contains("audit passed"), "{out}");

    // The kept store passes an audit run by hand, and its certificates verify on their own.
    let (code, out2, err2) = run_cmd(
        &coord,
        &s(&["audit", "--data-dir", dir.to_str().unwrap()]),
        Duration::from_secs(120),
    )
    .unwrap();
    assert_eq!(code, 0, "audit of the kept demo store:\n{out2}\n{err2}");
    let cert = dir.join("certificates/riverside-weekend-k3.json");
    let (code, out3, err3) = run_cmd(
        &coord,
        &s(&["verify-certificate", cert.to_str().unwrap()]),
        Duration::from_secs(60),
    )
    .unwrap();
    assert_eq!(code, 0, "{out3}{err3}");

    // A directory that is not empty is refused, and left as it was.
    let (code, _, err) = run_cmd(
        &coord,
        &s(&["demo", "--data-dir", dir.to_str().unwrap()]),
        Duration::from_secs(60),
    )
    .unwrap();
    assert_ne!(code, 0);
    assert!(err.contains("not empty"), "{err}");
    assert!(cert.exists());
}
