//! The `plan` command as a process: help states the counting convention, JSON has the
//! documented shape, bad input fails with a message and a non-zero exit.

use std::process::Command;

fn plan(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cubehunt-coordinator"))
        .arg("plan")
        .args(args)
        .output()
        .expect("the coordinator binary runs")
}

#[test]
fn help_states_the_counting_convention() {
    let o = plan(&["--help"]);
    assert!(o.status.success());
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        text.contains("min(|x|,|y|,|z|) <= bound") && text.contains("unordered triple"),
        "{text}"
    );
}

#[test]
fn json_lists_targets_and_skipped() {
    let o = plan(&[
        "--k", "30..40", "--bound", "1e12", "--from", "1e9", "--json",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let j: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    // 31, 32, 40 are ±4 mod 9 (every cube is 0, ±1 mod 9)
    let skipped: Vec<i64> = j["skipped"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["k"].as_i64().unwrap())
        .collect();
    assert_eq!(skipped, vec![31, 32, 40]);
    let targets = j["targets"].as_array().unwrap();
    assert_eq!(targets.len(), 8);
    for (i, t) in targets.iter().enumerate() {
        assert_eq!(t["rank"].as_u64(), Some(i as u64 + 1));
        let (total, new) = (
            t["expected_total"].as_f64().unwrap(),
            t["expected_new"].as_f64().unwrap(),
        );
        assert!(total > new && new > 0.0, "{t}");
        assert!(t["core_years"].as_f64().unwrap() > 0.0);
        assert!(t["singular_series"].as_f64().unwrap() > 0.0);
        assert!(t["digits_per_solution"].as_f64().unwrap() > 0.0);
    }
}

#[test]
fn bad_input_fails_with_a_message() {
    for args in [
        &["--k", "3", "--bound", "1e6", "--from", "1e7"][..],
        &["--k", "3", "--bound", "ten"][..],
        &["--k", "9..1", "--bound", "1e6"][..],
        &["--k", "1..1e9", "--bound", "1e6"][..],
    ] {
        let o = plan(args);
        assert!(!o.status.success(), "{args:?}");
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(err.starts_with("error: --"), "{args:?}: {err}");
    }
}

#[test]
fn negative_numbers_are_values_with_our_own_messages() {
    // a negative k is the mirror of −k (every coordinate negated), so it is planned
    let o = plan(&["--k", "-3,30", "--bound", "1e6", "--json"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let j: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let ks: Vec<i64> = j["targets"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["k"].as_i64().unwrap())
        .collect();
    assert!(ks.contains(&-3) && ks.contains(&30), "{ks:?}");
    for bad in ["-5", "0", "1e99"] {
        let o = plan(&["--k", "3", "--bound", bad]);
        assert!(!o.status.success());
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(
            err.contains(&format!(
                "--bound: {bad} is outside the supported range 1 ..= 2^63 − 1 (both ends included)"
            )),
            "{bad}: {err}"
        );
    }
}
