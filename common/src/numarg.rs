//! Parsing of numbers given on command lines and in admin requests: plain integers
//! (`1000000`, `1_000_000`) and exact scientific notation (`1e9`, `2.5e6`).

/// How a range's end is written in messages: powers of two minus one by name, so that a
/// reader sees at once which width the limit comes from.
pub fn show_limit(v: i128) -> String {
    match v {
        v if v == i128::from(u64::MAX) => "2^64 − 1".into(),
        v if v == i128::from(i64::MAX) => "2^63 − 1".into(),
        v if v == i128::from(i64::MIN) => "−2^63".into(),
        v => v.to_string(),
    }
}

/// The one message for a number outside what a setting takes (both ends included).
pub fn out_of_range(s: &str, lo: i128, hi: i128) -> String {
    format!(
        "{} is outside the supported range {} ..= {} (both ends included)",
        s.trim(),
        show_limit(lo),
        show_limit(hi)
    )
}

/// A parser for a count in `lo ..= hi` (same notation as [`parse_u64`]), for command-line
/// flags: `value_parser = numarg::u64_in(1, 4096)`.
pub fn u64_in(lo: u64, hi: u64) -> impl Fn(&str) -> Result<u64, String> + Clone + Send + Sync {
    move |s| {
        let v = parse_u64(s).map_err(|e| {
            if s.trim().starts_with('-') || e.contains("outside the supported range") {
                out_of_range(s, i128::from(lo), i128::from(hi))
            } else {
                e
            }
        })?;
        if (lo..=hi).contains(&v) {
            Ok(v)
        } else {
            Err(out_of_range(s, i128::from(lo), i128::from(hi)))
        }
    }
}

/// Parse a non-negative integer, accepting `1e9`-style input when the value is an exact integer.
pub fn parse_u64(s: &str) -> Result<u64, String> {
    let t = s.trim().replace('_', "");
    let bad = || format!("{s:?} is not a non-negative integer (examples: 1000000, 1e6, 2.5e6)");
    if t.is_empty() || t.len() > 40 {
        return Err(bad());
    }
    if t.bytes().all(|b| b.is_ascii_digit()) {
        return t
            .parse::<u64>()
            .map_err(|_| out_of_range(s, 0, i128::from(u64::MAX)));
    }
    let (mant, exp) = t.split_once(['e', 'E']).ok_or_else(bad)?;
    let exp: u32 = exp
        .strip_prefix('+')
        .unwrap_or(exp)
        .parse()
        .map_err(|_| bad())?;
    let (int, frac) = mant.split_once('.').unwrap_or((mant, ""));
    if int.is_empty() && frac.is_empty()
        || !int.bytes().all(|b| b.is_ascii_digit())
        || !frac.bytes().all(|b| b.is_ascii_digit())
    {
        return Err(bad());
    }
    let frac = frac.trim_end_matches('0');
    let int = int.trim_start_matches('0');
    if int.is_empty() && frac.is_empty() {
        return Ok(0);
    }
    if frac.len() as u32 > exp {
        return Err(format!("{s:?} is not an integer"));
    }
    // Bound the size before building any digits: the value is the digits of `int` and
    // `frac` times 10^(exp − frac.len()), and u64::MAX has 20 digits.
    let significant = format!("{int}{frac}").trim_start_matches('0').len() as u64;
    if significant + u64::from(exp) - frac.len() as u64 > 20 {
        return Err(out_of_range(s, 0, i128::from(u64::MAX)));
    }
    let digits = format!(
        "{int}{frac}{}",
        "0".repeat((exp - frac.len() as u32) as usize)
    );
    let digits = digits.trim_start_matches('0');
    if digits.is_empty() {
        return Ok(0);
    }
    digits
        .parse::<u64>()
        .map_err(|_| out_of_range(s, 0, i128::from(u64::MAX)))
}

/// Parse a signed integer (`-42`, `1e3`, `-1e3`).
pub fn parse_i64(s: &str) -> Result<i64, String> {
    let t = s.trim();
    let (neg, body) = match t.strip_prefix('-') {
        Some(b) => (true, b),
        None => (false, t),
    };
    let range = || out_of_range(s, i128::from(i64::MIN), i128::from(i64::MAX));
    let v = parse_u64(body).map_err(|e| {
        if e.contains("outside the supported range") {
            range()
        } else {
            format!(
                "{:?} is not an integer (examples: 114, -42, 1e6, -2.5e6)",
                t
            )
        }
    })?;
    if neg {
        if v > i64::MAX as u64 + 1 {
            return Err(range());
        }
        Ok((v as i128).wrapping_neg() as i64)
    } else {
        i64::try_from(v).map_err(|_| range())
    }
}

/// Parse a comma-separated list of signed integers (`114,390,627`), refusing repeats.
pub fn parse_i64_list(s: &str) -> Result<Vec<i64>, String> {
    let mut out = Vec::new();
    for part in s.split(',') {
        let v = parse_i64(part)?;
        if out.contains(&v) {
            return Err(format!("{v} appears twice in {s:?}"));
        }
        out.push(v);
    }
    Ok(out)
}

/// One value of a target set, and whether it came from a range `A..B` (callers may skip
/// inadmissible values of a range but refuse one named on its own).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KItem {
    pub k: i64,
    pub from_range: bool,
}

/// Parse a target set: `K`, a list `K,K,…`, a range `A..B` (both ends included), or a
/// comma-separated mix (`3,33,100..120`, negative values allowed: `-10..-1`). Refuses an
/// empty set, junk, an empty range, a value named twice, and more than `max` values — the
/// count is checked before any range is expanded, so `1..1e18` allocates nothing.
pub fn parse_k_set(s: &str, max: usize) -> Result<Vec<KItem>, String> {
    if s.trim().is_empty() {
        return Err(
            "the target set is empty: give K, K,K,… or A..B (e.g. 3,33,42 or 1..100)".into(),
        );
    }
    let mut out: Vec<KItem> = Vec::new();
    for part in s.split(',') {
        let part = part.trim();
        if let Some((a, b)) = part.split_once("..") {
            let lo = parse_i64(a).map_err(|e| format!("range {part:?}: {e}"))?;
            let hi = parse_i64(b).map_err(|e| format!("range {part:?}: {e}"))?;
            if lo > hi {
                return Err(format!(
                    "range {part:?} is empty: its start {lo} is above its end {hi}"
                ));
            }
            let n = (hi as i128 - lo as i128 + 1) as u128;
            if n + out.len() as u128 > max as u128 {
                return Err(format!(
                    "{s:?} names more than {max} values; give fewer at a time"
                ));
            }
            out.extend((lo..=hi).map(|k| KItem {
                k,
                from_range: true,
            }));
        } else {
            let k = parse_i64(part)?;
            out.push(KItem {
                k,
                from_range: false,
            });
            if out.len() > max {
                return Err(format!(
                    "{s:?} names more than {max} values; give fewer at a time"
                ));
            }
        }
    }
    let mut seen: Vec<i64> = out.iter().map(|i| i.k).collect();
    seen.sort_unstable();
    if let Some(w) = seen.windows(2).find(|w| w[0] == w[1]) {
        return Err(format!("{s:?} names {} twice", w[0]));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn accepts_plain_and_scientific() {
        assert_eq!(parse_u64("1e9").unwrap(), 1_000_000_000);
        assert_eq!(parse_u64("2.5e6").unwrap(), 2_500_000);
        assert_eq!(parse_u64("1_000").unwrap(), 1000);
        assert_eq!(parse_u64("18446744073709551615").unwrap(), u64::MAX);
        assert_eq!(parse_i64("-1e3").unwrap(), -1000);
        assert_eq!(parse_i64("-9223372036854775808").unwrap(), i64::MIN);
        assert_eq!(parse_i64_list("114, 390,627").unwrap(), vec![114, 390, 627]);
    }
    #[test]
    fn refuses_junk() {
        for bad in [
            "",
            "abc",
            "1.5",
            "1e",
            "e5",
            "1e99",
            "-3",
            "18446744073709551616",
            "1.25e1",
            "0x10",
        ] {
            assert!(parse_u64(bad).is_err(), "{bad}");
        }
        assert!(parse_i64("9223372036854775808").is_err());
        // Huge exponents are refused before any digit is built (no allocation of their size).
        for huge in [
            "1e800000000",
            "9e4294967295",
            "0.5e800000000",
            "-1e800000000",
        ] {
            let e = parse_i64(huge).unwrap_err();
            assert!(
                e.contains("outside the supported range −2^63 ..= 2^63 − 1"),
                "{huge}: {e}"
            );
        }
        assert_eq!(parse_u64("0e800000000").unwrap(), 0);
        assert_eq!(parse_u64("0.0e9").unwrap(), 0);
        assert_eq!(parse_u64("1.8446744073709551615e19").unwrap(), u64::MAX);
        assert_eq!(parse_u64("0.00001e10").unwrap(), 100_000);
        assert!(parse_i64_list("1,2,1").is_err());
    }
    #[test]
    fn one_message_for_out_of_range() {
        let p = u64_in(1, 64);
        assert_eq!(p("1e1").unwrap(), 10);
        for bad in ["0", "65", "-1", "1e99"] {
            let e = p(bad).unwrap_err();
            assert_eq!(
                e,
                format!("{bad} is outside the supported range 1 ..= 64 (both ends included)")
            );
        }
        assert!(p("ten").unwrap_err().contains("not a non-negative integer"));
        assert_eq!(
            parse_u64("1e99").unwrap_err(),
            "1e99 is outside the supported range 0 ..= 2^64 − 1 (both ends included)"
        );
        assert_eq!(
            parse_i64("-1e99").unwrap_err(),
            "-1e99 is outside the supported range −2^63 ..= 2^63 − 1 (both ends included)"
        );
        assert!(parse_i64("-x")
            .unwrap_err()
            .contains("\"-x\" is not an integer"));
    }
    #[test]
    fn target_sets_mix_lists_and_ranges() {
        let ks = |s: &str| -> Vec<(i64, bool)> {
            parse_k_set(s, 100)
                .unwrap()
                .iter()
                .map(|i| (i.k, i.from_range))
                .collect()
        };
        assert_eq!(ks("3, 33,42"), vec![(3, false), (33, false), (42, false)]);
        assert_eq!(
            ks("-2..1,7"),
            vec![(-2, true), (-1, true), (0, true), (1, true), (7, false)]
        );
        assert_eq!(ks("1e1..11"), vec![(10, true), (11, true)]);
        for bad in [
            "", " ", "a", "3..1", "1..", "1,1", "1..3,2", "1..101", "1..1e18", "3,,4",
        ] {
            assert!(parse_k_set(bad, 100).is_err(), "{bad:?}");
        }
        assert!(parse_k_set("1..100", 100).is_ok());
        assert!(parse_k_set("1..100,200", 100).is_err());
    }
}
