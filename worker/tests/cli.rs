//! The `solo` and `scan` command lines: JSON shape, agreement with the kernel, refusals.

use std::process::{Command, Output};

fn worker(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_cubehunt-worker"))
        .args(args)
        .output()
        .expect("worker runs")
}

fn json(args: &[&str]) -> serde_json::Value {
    let o = worker(args);
    assert!(
        o.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    let text = String::from_utf8(o.stdout).unwrap();
    assert_eq!(
        text.trim_end().lines().count(),
        1,
        "stdout must be one JSON object: {text}"
    );
    serde_json::from_str(&text).unwrap()
}

fn triples(v: &serde_json::Value) -> Vec<Vec<String>> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|t| {
            t.as_array()
                .unwrap()
                .iter()
                .map(|s| s.as_str().unwrap().to_string())
                .collect()
        })
        .collect()
}

#[test]
fn solo_json_has_the_documented_shape() {
    // k = 3: 1³+1³+1³ and 4³+4³+(−5)³ (common practice, no source).
    let v = json(&[
        "solo",
        "--k",
        "3",
        "--bound",
        "1e3",
        "--threads",
        "2",
        "--json",
        "--quiet",
    ]);
    for key in [
        "k",
        "bound",
        "solutions",
        "digest",
        "candidates",
        "elapsed_s",
        "kernel",
        "regions",
        "threads",
    ] {
        assert!(v.get(key).is_some(), "missing {key}: {v}");
    }
    assert_eq!(v["k"], 3);
    assert_eq!(v["bound"], 1000);
    assert_eq!(v["kernel"], cubehunt_common::KERNEL_VERSION);
    assert_eq!(
        triples(&v["solutions"]),
        vec![vec!["-5", "4", "4"], vec!["1", "1", "1"]]
    );
    let digest: cubehunt_common::Digest = v["digest"].as_str().unwrap().parse().unwrap();
    assert_eq!(digest.candidates, v["candidates"].as_u64().unwrap());
    let regions = v["regions"].as_array().unwrap();
    let names: Vec<&str> = regions
        .iter()
        .map(|r| r["region"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["small", "equal", "main"]);
    let sum: cubehunt_common::Digest = regions
        .iter()
        .map(|r| {
            r["digest"]
                .as_str()
                .unwrap()
                .parse::<cubehunt_common::Digest>()
                .unwrap()
        })
        .sum();
    assert_eq!(sum, digest);
    // The same digest on one thread.
    let one = json(&[
        "solo",
        "--k",
        "3",
        "--bound",
        "1000",
        "--threads",
        "1",
        "--json",
        "-q",
    ]);
    assert_eq!(one["digest"], v["digest"]);
}

#[test]
fn scan_json_matches_the_kernel_and_negative_k_negates() {
    let v = json(&[
        "scan", "--k", "-3", "--region", "main", "--d-min", "1", "--d-max", "300", "--z-min", "1",
        "--z-max", "2000", "--json", "-q",
    ]);
    let rect = cubehunt_common::Rect {
        region: cubehunt_common::Region::Main,
        d_lo: 1,
        d_hi: 300,
        z_lo: 1,
        z_hi: 2000,
    };
    let out = cubehunt_common::kernel::scan(-3, &rect, 1, &|_| {}).unwrap();
    assert_eq!(v["digest"].as_str().unwrap(), out.digest.to_string());
    assert_eq!(v["bound"], 2000);
    assert_eq!(v["regions"].as_array().unwrap().len(), 1);
    assert!(triples(&v["solutions"]).contains(&vec!["-4".to_string(), "-4".into(), "5".into()]));
}

#[test]
fn human_output_lists_solutions_canonically() {
    let o = worker(&["solo", "--k", "12", "--bound", "8", "-q"]);
    assert!(o.status.success());
    let text = String::from_utf8(o.stdout).unwrap();
    // 7³ + 10³ + (−11)³ = 12 (small published tables, from memory; 343 + 1000 − 1331 = 12).
    assert!(text.lines().any(|l| l.trim() == "-11 7 10"), "{text}");
    assert!(text.contains("digest h"));
}

#[test]
fn bad_input_is_refused_with_a_reason() {
    let cases: &[(&[&str], &str)] = &[
        (&["solo", "--k", "4", "--bound", "10"], "no solutions"),
        (&["solo", "--k", "-13", "--bound", "10"], "mod 9"),
        (&["solo", "--k", "27", "--bound", "10"], "cube"),
        (&["solo", "--k", "0", "--bound", "10"], "k = 0"),
        (&["solo", "--k", "2e12", "--bound", "10"], "2^40"),
        (&["solo", "--k", "3", "--bound", "0"], "at least 1"),
        (&["solo", "--k", "3", "--bound", "1e19"], "2^63"),
        (&["solo", "--k", "three", "--bound", "10"], "not"),
        (
            &["solo", "--k", "3", "--bound", "1.5"],
            "not a non-negative integer",
        ),
        (&["solo", "--k", "3", "--bound", "1.5e0"], "not an integer"),
        (
            &[
                "scan", "--k", "33", "--region", "small", "--z-min", "0", "--z-max", "9",
            ],
            "Z0",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "equal", "--z-min", "2", "--z-max", "90",
            ],
            "z_lo",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "equal", "--d-max", "5", "--z-min", "5",
                "--z-max", "90",
            ],
            "no d axis",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "main", "--d-min", "0", "--d-max", "5", "--z-min",
                "5", "--z-max", "90",
            ],
            "d_lo",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "main", "--d-min", "9", "--d-max", "9", "--z-min",
                "5", "--z-max", "90",
            ],
            "empty",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "main", "--d-min", "1", "--d-max", "9", "--z-min",
                "90", "--z-max", "90",
            ],
            "empty",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "main", "--d-min", "100", "--d-max", "200",
                "--z-min", "5", "--z-max", "90",
            ],
            "α",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "main", "--d-min", "1", "--d-max", "9", "--z-min",
                "5", "--z-max", "1e19",
            ],
            "2^63",
        ),
        (
            &[
                "scan", "--k", "33", "--region", "middle", "--z-min", "5", "--z-max", "90",
            ],
            "region",
        ),
    ];
    for (args, why) in cases {
        let o = worker(args);
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(!o.status.success(), "{args:?} was accepted");
        assert!(o.stdout.is_empty(), "{args:?} printed a result");
        assert!(err.contains(why), "{args:?}: {err:?} does not say {why:?}");
    }
    // A cube is searched with --allow-cube, non-trivial solutions only:
    // 9³ + (−6)³ + (−8)³ = 1 (Mahler 1936, t = 1; from memory, 729 − 216 − 512 = 1).
    let v = json(&[
        "solo",
        "--k",
        "1",
        "--bound",
        "10",
        "--allow-cube",
        "--json",
        "-q",
    ]);
    assert_eq!(v["nontrivial_only"], true);
    assert!(triples(&v["solutions"]).contains(&vec!["-8".to_string(), "-6".into(), "9".into()]));
}
