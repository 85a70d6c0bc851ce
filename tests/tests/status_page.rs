//! The status page in a real browser: a coordinator and two workers on loopback run a small
//! campaign to the end, a second campaign waits untouched; headless Chromium loads `/`,
//! and every number the page shows is compared with the JSON API it was drawn from.
//! A screenshot is saved as `target/status-page.png`.
//!
//! Needs Debian's `chromium` (installed by `deploy/bootstrap.sh`); set
//! `CUBEHUNT_SKIP_BROWSER=1` to skip on a machine without it, or `CUBEHUNT_CHROMIUM=PATH` to
//! use another build.

use anyhow::{bail, Context, Result};
use cubehunt_tests::{bin, run_cmd, serial, unix_now, Coordinator, Worker};
use serde_json::Value;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::time::Duration;

fn chromium() -> Option<PathBuf> {
    if let Ok(p) = std::env::var("CUBEHUNT_CHROMIUM") {
        return Some(PathBuf::from(p));
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .map(|d| d.join("chromium"))
        .find(|p| p.is_file())
}

fn browser_args(profile: &Path) -> Vec<String> {
    [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-dev-shm-usage",
        "--virtual-time-budget=5000",
    ]
    .iter()
    .map(|s| s.to_string())
    .chain([format!("--user-data-dir={}", profile.display())])
    .collect()
}

/// One number as the page shows it: `data-value` (the raw value) and the visible text.
#[derive(Debug, Clone)]
struct Shown {
    value: String,
    text: String,
}

fn unescape(s: &str) -> String {
    s.replace("&quot;", "\"")
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&nbsp;", "\u{a0}")
        .replace("&amp;", "&")
}

fn attr(tag: &str, name: &str) -> Option<String> {
    let key = format!("{name}=\"");
    let i = tag.find(&key)? + key.len();
    let j = tag[i..].find('"')? + i;
    Some(unescape(&tag[i..j]))
}

/// Every element with a `data-num` attribute in the serialised DOM, by its `data-num`.
fn shown_numbers(dom: &str) -> BTreeMap<String, Shown> {
    let mut out = BTreeMap::new();
    let mut at = 0;
    while let Some(i) = dom[at..].find("data-num=\"") {
        let i = at + i;
        let start = dom[..i].rfind('<').expect("attribute inside a tag");
        let end = i + dom[i..].find('>').expect("tag ends");
        let tag = &dom[start..end];
        let text_end = end + 1 + dom[end + 1..].find('<').unwrap_or(0);
        let key = attr(tag, "data-num").unwrap();
        out.insert(
            key,
            Shown {
                value: attr(tag, "data-value").unwrap_or_default(),
                text: unescape(&dom[end + 1..text_end]),
            },
        );
        at = end;
    }
    out
}

/// The `data-triple` cells of the solutions table.
fn shown_triples(dom: &str) -> BTreeSet<String> {
    let mut out = BTreeSet::new();
    let mut at = 0;
    while let Some(i) = dom[at..].find("data-triple=\"") {
        let i = at + i;
        let end = i + dom[i..].find('>').unwrap();
        out.insert(attr(&dom[i..end], "data-triple").unwrap());
        at = end;
    }
    out
}

fn get<'a>(shown: &'a BTreeMap<String, Shown>, key: &str) -> Result<&'a Shown> {
    shown.get(key).with_context(|| {
        format!(
            "the page shows no data-num={key:?}; it shows {:?}",
            shown.keys().collect::<Vec<_>>()
        )
    })
}

/// A count as shown ("1,234") equals the API's.
fn check_count(shown: &BTreeMap<String, Shown>, key: &str, api: &Value) -> Result<()> {
    let s = get(shown, key)?;
    let want = api
        .as_i64()
        .with_context(|| format!("API value for {key} is {api}"))?;
    let text: i64 = s
        .text
        .replace(',', "")
        .parse()
        .with_context(|| format!("{key}: shown text {:?} is not a count", s.text))?;
    if text != want || s.value != want.to_string() {
        bail!(
            "{key}: the page shows {:?} (data-value {:?}), the API says {want}",
            s.text,
            s.value
        );
    }
    Ok(())
}

/// A fraction as shown ("58.0%", "100%") matches the API's to the shown precision.
fn check_fraction(shown: &BTreeMap<String, Shown>, key: &str, api: &Value) -> Result<()> {
    let s = get(shown, key)?;
    let want = api
        .as_f64()
        .with_context(|| format!("API value for {key} is {api}"))?;
    let pct: f64 = s
        .text
        .trim_end_matches('%')
        .parse()
        .with_context(|| format!("{key}: shown text {:?} is not a percentage", s.text))?;
    if (pct / 100.0 - want).abs() > 0.0006 || (want < 1.0 && s.text == "100%") {
        bail!("{key}: the page shows {:?}, the API says {want}", s.text);
    }
    Ok(())
}

fn chromium_run(browser: &Path, profile: &Path, extra: &[String], url: &str) -> Result<String> {
    let mut args = browser_args(profile);
    args.extend(extra.iter().cloned());
    args.push(url.to_string());
    let (code, out, err) = run_cmd(browser, &args, Duration::from_secs(120))?;
    if code != 0 {
        bail!("{} exited with {code}: {err}", browser.display());
    }
    Ok(out)
}

#[test]
fn status_page_shows_what_the_api_says() -> Result<()> {
    if std::env::var("CUBEHUNT_SKIP_BROWSER").as_deref() == Ok("1") {
        eprintln!("status page browser test skipped: CUBEHUNT_SKIP_BROWSER=1");
        return Ok(());
    }
    let Some(browser) = chromium() else {
        panic!(
            "the status-page test needs Chromium and `chromium` is not on PATH: run `bash deploy/bootstrap.sh` \
             (it installs Debian's chromium package), or set CUBEHUNT_SKIP_BROWSER=1 to skip this test"
        );
    };
    let _g = serial();
    let tmp = tempfile::tempdir()?;
    let root = tmp.path();
    let coord = Coordinator::start(root, &["--heartbeat-s", "1"])?;

    // A campaign the two workers finish. Known solutions inside the bound: for k = 3,
    // (1, 1, 1) and (4, 4, −5) (common knowledge; the kernel's own tests check them against
    // brute force); the page must list whatever the API lists.
    coord.create_campaign("maths-club-friday", "3,10,30", "300", 1.0)?;
    let mut workers = vec![
        Worker::start(root, &coord.url(), "dora", &[])?,
        Worker::start(root, &coord.url(), "emeka", &[])?,
    ];
    coord
        .wait_complete("maths-club-friday", Duration::from_secs(240))
        .with_context(|| {
            format!(
                "worker logs:\n{}\n{}\ncoordinator log:\n{}",
                workers[0].log_text(),
                workers[1].log_text(),
                coord.log_text()
            )
        })?;
    for w in &mut workers {
        w.proc.kill9();
    }
    // A second campaign that nobody works on: 0% settled, no rate, no ETA.
    coord.create_campaign("maths-club-saturday", "42", "1e5", 30.0)?;

    // Nothing moves from here on: what the API says now is what the page must show.
    let campaigns = coord.get("/api/v1/campaigns")?;
    let api_workers = coord.workers()?;
    let campaigns = campaigns
        .as_array()
        .context("/api/v1/campaigns is an array")?
        .clone();
    assert_eq!(campaigns.len(), 2);

    let profile = root.join("chromium-profile");
    let url = format!("{}/", coord.url());
    let dom = chromium_run(&browser, &profile, &["--dump-dom".to_string()], &url)?;
    assert!(
        dom.contains("data-state=\"ok\""),
        "the page did not reach the API; its DOM:\n{dom}"
    );
    let shown = shown_numbers(&dom);

    let mut total_units = 0;
    let mut settled_units = 0;
    let mut targets = 0;
    let mut api_triples = BTreeSet::new();
    for c in &campaigns {
        let name = c["name"].as_str().unwrap();
        let cs = format!("c/{name}");
        assert_eq!(
            get(&shown, &format!("{cs}/state"))?.text,
            c["state"].as_str().unwrap(),
            "{name}: state"
        );
        check_fraction(&shown, &format!("{cs}/fraction"), &c["fraction"])?;
        assert_eq!(
            get(&shown, &format!("{cs}/bound"))?.value,
            c["bound"].to_string(),
            "{name}: bound"
        );
        let eta = get(&shown, &format!("{cs}/eta_s"))?;
        if c["state"] == "complete" {
            assert_eq!(eta.text, "done", "{name}: a complete campaign's ETA");
        } else if c["eta_s"].is_null() {
            assert_eq!(eta.text, "–", "{name}: no rate, so no ETA");
        }
        for t in c["targets"].as_array().unwrap() {
            let k = t["k"].as_i64().unwrap();
            let ts = format!("t/{name}/{k}");
            for (field, api) in [
                ("total", "units_total"),
                ("settled", "units_settled"),
                ("leased", "units_leased"),
                ("disputed", "units_disputed"),
            ] {
                check_count(&shown, &format!("{ts}/{api}"), &t["units"][field])?;
            }
            check_fraction(&shown, &format!("{ts}/fraction"), &t["fraction"])?;
            check_count(
                &shown,
                &format!("{ts}/solutions"),
                &Value::from(t["solutions"].as_array().unwrap().len()),
            )?;
            // Found versus expected, as the API states it.
            let m = &t["model"];
            check_count(&shown, &format!("{ts}/model_found"), &m["found"])?;
            check_count(&shown, &format!("{ts}/model_low"), &m["low"])?;
            check_count(&shown, &format!("{ts}/model_high"), &m["high"])?;
            let e = get(&shown, &format!("{ts}/model_expected"))?;
            let ev: f64 = e.value.parse().context("model_expected value")?;
            anyhow::ensure!(
                (ev - m["expected_total"].as_f64().unwrap()).abs() < 1e-9,
                "{ts}: expected {ev} vs the API's {}",
                m["expected_total"]
            );
            for s in t["solutions"].as_array().unwrap() {
                let parts: Vec<&str> = s
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_str().unwrap())
                    .collect();
                api_triples.insert(parts.join(","));
            }
            total_units += t["units"]["total"].as_i64().unwrap();
            settled_units += t["units"]["settled"].as_i64().unwrap();
            targets += 1;
        }
    }
    let first = &campaigns
        .iter()
        .find(|c| c["name"] == "maths-club-friday")
        .unwrap();
    assert_eq!(first["state"], "complete");
    assert!(
        api_triples.contains("1,1,1") && api_triples.contains("-5,4,4"),
        "k = 3 solutions {api_triples:?}"
    );
    assert_eq!(
        shown_triples(&dom),
        api_triples,
        "solutions table vs the API"
    );

    check_count(&shown, "sum/campaigns", &Value::from(campaigns.len()))?;
    check_count(&shown, "sum/targets", &Value::from(targets))?;
    check_count(&shown, "sum/units_total", &Value::from(total_units))?;
    check_count(&shown, "sum/units_settled", &Value::from(settled_units))?;
    check_count(&shown, "sum/solutions", &Value::from(api_triples.len()))?;
    let recent = api_workers
        .iter()
        .filter(|w| unix_now() - w["last_seen"].as_i64().unwrap() < 600)
        .count();
    check_count(&shown, "sum/workers_active", &Value::from(recent))?;
    assert_eq!(api_workers.len(), 2);
    for w in &api_workers {
        let ws = format!("w/{}", w["id"]);
        check_count(&shown, &format!("{ws}/id"), &w["id"])?;
        check_count(&shown, &format!("{ws}/units_settled"), &w["units_settled"])?;
        check_count(&shown, &format!("{ws}/errors"), &w["errors"])?;
        check_count(&shown, &format!("{ws}/threads"), &w["threads"])?;
    }

    // The screenshot, kept for people to look at.
    let target_dir = bin("cubehunt-coordinator")
        .parent()
        .and_then(Path::parent)
        .unwrap()
        .to_path_buf();
    let png = target_dir.join("status-page.png");
    let _ = std::fs::remove_file(&png);
    chromium_run(
        &browser,
        &profile,
        &[
            format!("--screenshot={}", png.display()),
            "--window-size=1280,900".into(),
        ],
        &url,
    )?;
    let bytes = std::fs::read(&png)
        .with_context(|| format!("chromium wrote no screenshot at {}", png.display()))?;
    assert!(
        bytes.starts_with(b"\x89PNG\r\n\x1a\n") && bytes.len() > 20_000,
        "{} is not a plausible screenshot",
        png.display()
    );
    eprintln!("status page screenshot: {}", png.display());
    Ok(())
}

#[test]
fn the_dom_reader_reads_numbers_and_triples() {
    // The reader above is the test's own code: check it on a fixed fragment.
    let dom = r#"<td class="n"><span data-num="t/a-b/3/units_total" data-value="1234">1,234</span></td>
        <b id="x" data-num="sum/solutions" data-value="2">2</b><td class="triple" data-triple="-5,4,4">-5, 4, 4</td>
        <span data-num="c/a&amp;b/state" data-value="active">active</span>"#;
    let s = shown_numbers(dom);
    assert_eq!(s["t/a-b/3/units_total"].text, "1,234");
    assert_eq!(s["t/a-b/3/units_total"].value, "1234");
    assert_eq!(s["sum/solutions"].value, "2");
    assert_eq!(s["c/a&b/state"].text, "active");
    assert_eq!(s.len(), 3);
    assert!(check_count(&s, "t/a-b/3/units_total", &Value::from(1234)).is_ok());
    assert!(check_count(&s, "t/a-b/3/units_total", &Value::from(1235)).is_err());
    assert_eq!(shown_triples(dom), BTreeSet::from(["-5,4,4".to_string()]));
}
