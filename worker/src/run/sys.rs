//! What the worker asks of the operating system: idle priority, the host name, whether it is
//! running on battery, and one-line timestamped log events on stderr.

use std::time::{SystemTime, UNIX_EPOCH};

/// Print one event line on stderr: `2026-01-01T00:00:00Z cubehunt-worker: text`.
macro_rules! event {
    ($($arg:tt)*) => {
        eprintln!("{} cubehunt-worker: {}", $crate::run::sys::utc_now(), format_args!($($arg)*))
    };
}
pub(crate) use event;

/// Current UTC time as `YYYY-MM-DDTHH:MM:SSZ`.
pub fn utc_now() -> String {
    let secs = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    utc(secs as i64)
}

/// Civil date from days since 1970-01-01 (the proleptic-Gregorian "days from civil"
/// inversion, common practice, no source).
pub fn utc(secs: i64) -> String {
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400);
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + if m <= 2 { 1 } else { 0 };
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem / 60 % 60,
        rem % 60
    )
}

/// Lower this process to idle priority: nice 19 and, on Linux, the `SCHED_IDLE` policy.
/// Must run before any thread is started (threads inherit both). Returns what was done.
pub fn lower_priority() -> Vec<String> {
    let mut done = Vec::new();
    // SAFETY: plain system calls on the calling process; no pointers kept.
    unsafe {
        if libc::setpriority(libc::PRIO_PROCESS, 0, 19) == 0 {
            done.push("nice 19".to_string());
        } else {
            done.push(format!(
                "nice 19 failed ({})",
                std::io::Error::last_os_error()
            ));
        }
        #[cfg(target_os = "linux")]
        {
            let p = libc::sched_param { sched_priority: 0 };
            if libc::sched_setscheduler(0, libc::SCHED_IDLE, &p) == 0 {
                done.push("SCHED_IDLE".to_string());
            } else {
                done.push(format!(
                    "SCHED_IDLE failed ({})",
                    std::io::Error::last_os_error()
                ));
            }
        }
    }
    done
}

pub fn hostname() -> String {
    let mut buf = [0u8; 256];
    // SAFETY: the buffer is valid for its length; gethostname NUL-terminates within it on success.
    let rc = unsafe { libc::gethostname(buf.as_mut_ptr() as *mut libc::c_char, buf.len() - 1) };
    if rc != 0 {
        return String::new();
    }
    let end = buf.iter().position(|&b| b == 0).unwrap_or(0);
    let s = String::from_utf8_lossy(&buf[..end]).to_string();
    s.chars()
        .filter(|c| c.is_ascii_graphic())
        .take(64)
        .collect()
}

/// True when a battery reports that it is discharging (Linux sysfs); false when unknown.
pub fn on_battery() -> bool {
    let Ok(dir) = std::fs::read_dir("/sys/class/power_supply") else {
        return false;
    };
    dir.filter_map(|e| e.ok()).any(|e| {
        let p = e.path();
        let kind = std::fs::read_to_string(p.join("type")).unwrap_or_default();
        let status = std::fs::read_to_string(p.join("status")).unwrap_or_default();
        kind.trim() == "Battery" && status.trim() == "Discharging"
    })
}

pub fn cores() -> usize {
    std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1)
}

#[cfg(test)]
mod tests {
    #[test]
    fn utc_formats_known_instants() {
        // 2000-03-01 is day 11017 after the epoch; 2024-02-29 is a leap day (common practice, no source).
        assert_eq!(super::utc(0), "1970-01-01T00:00:00Z");
        assert_eq!(super::utc(11_017 * 86_400 + 3661), "2000-03-01T01:01:01Z");
        assert_eq!(super::utc(1_709_164_800), "2024-02-29T00:00:00Z");
    }
}
