//! Hostile clients against the real coordinator process on loopback: a client that stalls in
//! its headers or its body, more connections than the limit, more requests than the rate
//! limit. Each test sets its limit small and checks that the coordinator enforces it and goes
//! on answering `/healthz`.

use cubehunt_tests::*;
use std::io::{Read, Write};
use std::net::TcpStream;
use std::time::{Duration, Instant};

/// Read from `s` until the peer closes (or `limit` passes); what was read and when the
/// connection ended (`None`: still open at `limit`).
fn read_until_closed(s: &mut TcpStream, limit: Duration) -> (Vec<u8>, Option<Duration>) {
    let t0 = Instant::now();
    let mut got = Vec::new();
    let mut buf = [0u8; 4096];
    loop {
        let left = limit.saturating_sub(t0.elapsed());
        if left.is_zero() {
            return (got, None);
        }
        s.set_read_timeout(Some(left)).unwrap();
        match s.read(&mut buf) {
            Ok(0) => return (got, Some(t0.elapsed())),
            Ok(n) => got.extend_from_slice(&buf[..n]),
            Err(e)
                if matches!(
                    e.kind(),
                    std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut
                ) =>
            {
                return (got, None)
            }
            // A reset is a close too.
            Err(_) => return (got, Some(t0.elapsed())),
        }
    }
}

fn healthz_ok(url: &str, timeout: Duration) -> bool {
    reqwest::blocking::Client::builder()
        .timeout(timeout)
        .build()
        .unwrap()
        .get(format!("{url}/healthz"))
        .send()
        .map(|r| r.status().is_success())
        .unwrap_or(false)
}

/// Resident memory of a process in KiB (Linux `/proc/PID/status`).
fn rss_kib(pid: i32) -> Option<u64> {
    let s = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    s.lines()
        .find(|l| l.starts_with("VmRSS:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

#[test]
fn a_client_stalling_in_its_headers_or_its_body_is_cut_off_at_the_timeout() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let coord = Coordinator::start(
        tmp.path(),
        &["--header-timeout-s", "1", "--body-timeout-s", "1"],
    )
    .unwrap();
    let addr = format!("127.0.0.1:{}", coord.port);

    // Half of the headers, then nothing.
    let mut s = TcpStream::connect(&addr).unwrap();
    s.write_all(b"GET /healthz HTTP/1.1\r\nHost: 127.0.0.1\r\nUser-Ag")
        .unwrap();
    let (got, closed) = read_until_closed(&mut s, Duration::from_secs(10));
    let closed = closed.expect("the coordinator should close a connection whose headers stall");
    eprintln!(
        "header stall: closed after {:.3} s (header_timeout_s = 1), answer {:?}",
        closed.as_secs_f64(),
        String::from_utf8_lossy(&got)
    );
    assert!(
        closed >= Duration::from_millis(900) && closed < Duration::from_secs(5),
        "closed after {closed:?}, want about 1 s"
    );
    assert!(
        !String::from_utf8_lossy(&got).contains("200 OK"),
        "a request with half its headers must not be served"
    );

    // A connection that sends nothing at all is cut off the same way.
    let mut idle = TcpStream::connect(&addr).unwrap();
    let (_, closed) = read_until_closed(&mut idle, Duration::from_secs(10));
    let closed = closed.expect("an idle connection should be closed");
    eprintln!(
        "silent connection: closed after {:.3} s",
        closed.as_secs_f64()
    );
    assert!(closed < Duration::from_secs(5), "{closed:?}");

    // Full headers, then a tenth of the announced body: refused (400) at the body timeout,
    // with a message, and nothing is stored.
    let mut s = TcpStream::connect(&addr).unwrap();
    s.write_all(
        b"POST /api/v1/enrol HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\nContent-Length: 100\r\n\r\n{\"owner\":",
    )
    .unwrap();
    let t0 = Instant::now();
    let (got, _) = read_until_closed(&mut s, Duration::from_secs(10));
    let text = String::from_utf8_lossy(&got).into_owned();
    eprintln!(
        "body stall: answered after {:.3} s (body_timeout_s = 1): {:?}",
        t0.elapsed().as_secs_f64(),
        text.lines().next().unwrap_or("")
    );
    assert!(
        text.starts_with("HTTP/1.1 400") && text.contains("bad_body"),
        "{text}"
    );
    assert!(t0.elapsed() < Duration::from_secs(5));
    assert_eq!(coord.get("/api/v1/workers").unwrap(), serde_json::json!([]));
    assert!(healthz_ok(&coord.url(), Duration::from_secs(5)));
}

#[test]
fn connections_beyond_the_limit_wait_and_the_coordinator_keeps_answering() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let coord = Coordinator::start(
        tmp.path(),
        &["--max-connections", "8", "--header-timeout-s", "1"],
    )
    .unwrap();
    let pid = coord.proc.as_ref().unwrap().pid();
    let addr = format!("127.0.0.1:{}", coord.port);
    let rss0 = rss_kib(pid);

    // 200 connections that each send a few bytes of headers and stall: 25 times the limit.
    let mut held: Vec<TcpStream> = (0..200)
        .map(|_| {
            let mut s = TcpStream::connect(&addr).expect("the kernel queues connections");
            let _ = s.write_all(b"GET / HTTP/1.1\r\n");
            s
        })
        .collect();
    let rss1 = rss_kib(pid);
    // Meanwhile an honest client is answered: it waits its turn behind the stalled ones,
    // which are cut off a batch of 8 per second.
    let t0 = Instant::now();
    let ok = wait_for(
        "/healthz under a connection flood",
        Duration::from_secs(60),
        || healthz_ok(&coord.url(), Duration::from_secs(60)).then_some(()),
    );
    eprintln!(
        "healthz answered {:.1} s into a flood of 200 stalled connections (limit 8); RSS {:?} KiB before, {:?} KiB with the flood",
        t0.elapsed().as_secs_f64(),
        rss0,
        rss1
    );
    ok.unwrap();
    // Every stalled connection was closed by the coordinator, none served.
    let mut served = 0;
    for s in held.iter_mut() {
        let (got, closed) = read_until_closed(s, Duration::from_secs(30));
        assert!(closed.is_some(), "a stalled connection was left open");
        served += usize::from(String::from_utf8_lossy(&got).contains("200 OK"));
    }
    assert_eq!(served, 0);
    drop(held);
    let p = coord.proc.as_ref().unwrap();
    assert!(p.child.is_some());
    assert!(healthz_ok(&coord.url(), Duration::from_secs(5)));
    let log = coord.log_text();
    assert!(!log.contains("panicked"), "{log}");

    // Many honest requests at once over many connections: each is answered (200), or
    // refused with 503 when beyond max_in_flight; none is dropped.
    let url = coord.url();
    let answers: Vec<u16> = std::thread::scope(|sc| {
        let hs: Vec<_> = (0..64)
            .map(|_| {
                let url = url.clone();
                sc.spawn(move || {
                    reqwest::blocking::Client::builder()
                        .timeout(Duration::from_secs(60))
                        .build()
                        .unwrap()
                        .get(format!("{url}/api/v1/campaigns"))
                        .send()
                        .map(|r| r.status().as_u16())
                        .unwrap_or(0)
                })
            })
            .collect();
        hs.into_iter().map(|h| h.join().unwrap()).collect()
    });
    assert!(answers.iter().all(|&s| s == 200 || s == 503), "{answers:?}");
    eprintln!(
        "64 concurrent requests with 8 connections allowed: {} answered 200, RSS after {:?} KiB",
        answers.iter().filter(|&&s| s == 200).count(),
        rss_kib(pid)
    );
}

#[test]
fn an_address_beyond_its_rate_is_told_to_wait() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    // One request per second on average, bursts of 5 (the start-up probe uses some).
    let coord =
        Coordinator::start(tmp.path(), &["--rate-per-s", "1", "--rate-burst", "5"]).unwrap();
    let http = reqwest::blocking::Client::new();
    let mut refused = None;
    for _ in 0..20 {
        let r = http
            .get(format!("{}/api/v1/about", coord.url()))
            .send()
            .unwrap();
        if r.status().as_u16() == 429 {
            let retry = r
                .headers()
                .get("retry-after")
                .and_then(|v| v.to_str().ok())
                .and_then(|v| v.parse::<u64>().ok());
            refused = Some((retry, r.json::<serde_json::Value>().unwrap()));
            break;
        }
        assert_eq!(r.status().as_u16(), 200);
    }
    let (retry, body) = refused.expect("20 requests at once exceed a burst of 5");
    assert!(matches!(retry, Some(1..=5)), "Retry-After {retry:?}");
    assert_eq!(body["error"], "rate_limited", "{body}");
    assert!(
        body["message"].as_str().unwrap().contains("per second"),
        "{body}"
    );
    // After waiting, the address is served again.
    std::thread::sleep(Duration::from_secs(retry.unwrap() + 1));
    assert!(healthz_ok(&coord.url(), Duration::from_secs(5)));
}
