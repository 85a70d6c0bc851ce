//! Progress on stderr: work done / total (in candidates), rate and time left.
//!
//! On a terminal the line is redrawn about twice a second; otherwise (a log file, a pipe) one
//! plain line is written every ten seconds. The computation only adds to an atomic counter.

use std::io::{IsTerminal, Write};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

pub struct Meter {
    shared: Arc<Shared>,
    drawer: Option<JoinHandle<()>>,
}

struct Shared {
    done: AtomicU64,
    stop: AtomicBool,
    /// Total as f64 bits; `exact` says whether it is a count or an estimate.
    total: AtomicU64,
    exact: AtomicBool,
    label: std::sync::Mutex<String>,
    start: Instant,
}

impl Meter {
    /// Start drawing (unless `quiet`). `total` is the expected number of candidates.
    pub fn start(total: f64, exact: bool, quiet: bool) -> Meter {
        let shared = Arc::new(Shared {
            done: AtomicU64::new(0),
            stop: AtomicBool::new(false),
            total: AtomicU64::new(total.to_bits()),
            exact: AtomicBool::new(exact),
            label: std::sync::Mutex::new(String::new()),
            start: Instant::now(),
        });
        let drawer = (!quiet).then(|| {
            let s = shared.clone();
            std::thread::spawn(move || draw_loop(&s))
        });
        Meter { shared, drawer }
    }

    pub fn add(&self, n: u64) {
        self.shared.done.fetch_add(n, Ordering::Relaxed);
    }

    pub fn set_label(&self, l: &str) {
        *self.shared.label.lock().unwrap() = l.to_string();
    }

    /// Stop drawing and erase the line on a terminal.
    pub fn finish(mut self) {
        self.stop_drawer();
    }

    fn stop_drawer(&mut self) {
        self.shared.stop.store(true, Ordering::Relaxed);
        if let Some(h) = self.drawer.take() {
            let _ = h.join();
        }
    }
}

impl Drop for Meter {
    fn drop(&mut self) {
        self.stop_drawer();
    }
}

fn draw_loop(s: &Shared) {
    let tty = std::io::stderr().is_terminal();
    let every = if tty {
        Duration::from_millis(500)
    } else {
        Duration::from_secs(10)
    };
    let mut last = Instant::now();
    let mut drew = false;
    while !s.stop.load(Ordering::Relaxed) {
        std::thread::sleep(Duration::from_millis(50));
        if last.elapsed() < every {
            continue;
        }
        last = Instant::now();
        let line = render(s);
        let mut e = std::io::stderr().lock();
        if tty {
            let _ = write!(e, "\r\x1b[K{line}");
        } else {
            let _ = writeln!(e, "{line}");
        }
        let _ = e.flush();
        drew = true;
    }
    if tty && drew {
        let _ = write!(std::io::stderr(), "\r\x1b[K");
    }
}

fn render(s: &Shared) -> String {
    let done = s.done.load(Ordering::Relaxed) as f64;
    let total = f64::from_bits(s.total.load(Ordering::Relaxed)).max(1.0);
    let exact = s.exact.load(Ordering::Relaxed);
    let secs = s.start.elapsed().as_secs_f64().max(1e-9);
    let rate = done / secs;
    // An estimated total may be passed; never show 100% before the end.
    let frac = (done / total).min(if exact { 1.0 } else { 0.999 });
    let eta = if rate > 0.0 {
        ((total - done).max(0.0) / rate).round() as u64
    } else {
        0
    };
    let label = s.label.lock().unwrap().clone();
    format!(
        "{label} {:5.1}%  {}/{}{} candidates  {}/s  elapsed {}  left {}",
        100.0 * frac,
        human(done),
        if exact { "" } else { "~" },
        human(total),
        human(rate),
        hms(secs as u64),
        if done > 0.0 && done < total {
            hms(eta)
        } else {
            "?".into()
        }
    )
}

/// 1234567 → "1.23M".
pub fn human(v: f64) -> String {
    let units = [(1e15, "P"), (1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k")];
    for (u, s) in units {
        if v >= u {
            return format!("{:.2}{s}", v / u);
        }
    }
    format!("{v:.0}")
}

pub fn hms(s: u64) -> String {
    format!("{}:{:02}:{:02}", s / 3600, s / 60 % 60, s % 60)
}
