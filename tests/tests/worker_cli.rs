//! The worker's command line and its guard rails: help that teaches, clear refusals of bad
//! input, a pinned coordinator key that cannot silently change, and `--once`.

use cubehunt_tests::*;
use std::time::Duration;

const SERVE: &[&str] = &["--retry-after-s", "1", "--sweep-s", "1"];

fn worker(args: &[&str]) -> (i32, String, String) {
    run_cmd(&bin("cubehunt-worker"), &s(args), Duration::from_secs(30)).unwrap()
}

#[test]
fn help_teaches_and_bad_input_is_refused_clearly() {
    let (code, out, _) = worker(&["run", "--help"]);
    assert_eq!(code, 0);
    for needle in [
        "--coordinator",
        "--state-dir",
        "--owner",
        "--threads",
        "--cpu-percent",
        "--coordinator-key",
        "--priority",
        "--once",
        "--max-units",
        "worker.key",
        "outbox/",
        "SIGTERM",
    ] {
        assert!(
            out.contains(needle),
            "run --help should mention {needle}:\n{out}"
        );
    }
    let tmp = tempfile::tempdir().unwrap();
    let st = tmp.path().join("st");
    let base = [
        "run",
        "--coordinator",
        "http://127.0.0.1:9",
        "--state-dir",
        st.to_str().unwrap(),
    ];
    let cases: Vec<(Vec<&str>, &str)> = vec![
        (
            vec!["--owner", "no spaces please"],
            "not a valid owner name",
        ),
        (
            vec!["--owner", "ok", "--coordinator-key", "abc"],
            "not a public key",
        ),
        (vec!["--owner", "ok", "--cpu-percent", "0"], "cpu-percent"),
        (vec!["--owner", "ok", "--max-units", "0"], "--max-units 0"),
    ];
    for (extra, needle) in cases {
        let mut a: Vec<&str> = base.to_vec();
        a.extend(extra.iter());
        let (code, out, err) = worker(&a);
        assert_ne!(code, 0, "{a:?} must fail");
        assert!(
            err.contains(needle),
            "{a:?}: stderr should say {needle:?}:\n{out}{err}"
        );
    }
    let (code, _, err) = worker(&[
        "run",
        "--coordinator",
        "ftp://x",
        "--state-dir",
        st.to_str().unwrap(),
        "--owner",
        "ok",
    ]);
    assert_ne!(code, 0);
    assert!(err.contains("http://"), "{err}");
    assert!(
        !st.join("worker.json").exists(),
        "nothing enrolled on bad input"
    );
}

#[test]
fn the_pinned_coordinator_key_cannot_change_and_once_does_one_unit() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let a = Coordinator::start(&tmp.path().join("a"), SERVE).unwrap();
    a.create_campaign("pin", "3", "100", 1e6).unwrap();

    // A wrong --coordinator-key on first contact: refused loudly, nothing enrolled.
    let wrong =
        cubehunt_common::sign::public_to_hex(&cubehunt_common::sign::generate().verifying_key());
    let bad_state = tmp.path().join("w-bad");
    let mut w =
        Worker::start_in(&bad_state, &a.url(), "zed", &["--coordinator-key", &wrong]).unwrap();
    let code = w.proc.wait_exit(Duration::from_secs(30)).unwrap();
    assert_ne!(code, 0);
    assert!(
        w.log_text().contains("COORDINATOR KEY MISMATCH"),
        "{}",
        w.log_text()
    );
    assert!(!bad_state.join("worker.json").exists());

    // The right key, and --once: one unit computed and acknowledged, then exit 0.
    let state = tmp.path().join("w-good");
    let mut w = Worker::start_in(
        &state,
        &a.url(),
        "yael",
        &["--coordinator-key", &a.public_key, "--once"],
    )
    .unwrap();
    let code = w.proc.wait_exit(Duration::from_secs(60)).unwrap();
    let log = w.log_text();
    assert_eq!(code, 0, "{log}");
    assert_eq!(lines_with(&log, "finished unit").len(), 1, "{log}");
    assert_eq!(lines_with(&log, "): accepted;").len(), 1, "{log}");
    assert!(
        std::fs::read_dir(state.join("outbox"))
            .unwrap()
            .next()
            .is_none(),
        "outbox empty after the answer"
    );
    let mode = {
        use std::os::unix::fs::PermissionsExt;
        std::fs::metadata(state.join("worker.key"))
            .unwrap()
            .permissions()
            .mode()
            & 0o777
    };
    assert_eq!(mode, 0o600, "the worker key is private");

    // The same state directory against another coordinator (another key): the key it
    // presents differs from the pinned one, so the worker stops with a loud error before it
    // asks for anything (its requests are signed for the pinned key and would be refused
    // there anyway).
    let b = Coordinator::start(&tmp.path().join("b"), SERVE).unwrap();
    b.create_campaign("impostor", "3", "100", 1e6).unwrap();
    // Make B know this worker under the same id and key, so that its requests are accepted
    // there and only the unit signatures can give B away.
    let id = w.worker_id().unwrap();
    let key_hex = std::fs::read_to_string(state.join("worker.key")).unwrap();
    let mut at_b = 0;
    for i in 0..10 {
        if at_b + 1 == id {
            break;
        }
        at_b = HandWorker::enrol(&b.url(), &format!("filler{i}"))
            .unwrap()
            .worker_id;
    }
    let twin = HandWorker::enrol_with_key(
        &b.url(),
        "yael",
        cubehunt_common::sign::secret_from_hex(&key_hex).unwrap(),
    )
    .unwrap();
    assert_eq!(
        twin.worker_id, id,
        "B must know the worker under the same id for this check"
    );
    let earlier = w.log_text().len();
    let mut w = Worker::start_in(&state, &b.url(), "yael", &["--max-backoff", "1"]).unwrap();
    let code = w.proc.wait_exit(Duration::from_secs(60)).unwrap();
    let log = w.log_text()[earlier..].to_string();
    assert_ne!(code, 0, "{log}");
    assert!(log.contains("COORDINATOR KEY MISMATCH"), "{log}");
    assert!(
        !log.contains("chunk 1/"),
        "no unit of the impostor was computed:\n{log}"
    );
    // And --coordinator-key that disagrees with the pinned file is refused at start.
    let mut w = Worker::start_in(
        &state,
        &a.url(),
        "yael",
        &["--coordinator-key", &b.public_key],
    )
    .unwrap();
    assert_ne!(w.proc.wait_exit(Duration::from_secs(30)).unwrap(), 0);
    assert!(
        w.log_text().contains("COORDINATOR KEY MISMATCH"),
        "{}",
        w.log_text()
    );
}
