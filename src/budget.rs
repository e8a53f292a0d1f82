//! Memory estimates for settings, checked against what the machine can give before any large
//! allocation.
//!
//! Why it exists: a typo such as `samples: 1000000000` or a mock ensemble with `T: 10000000`
//! would otherwise pass validation and then abort on allocation or run for days. The
//! estimates count the large arrays a setting implies (values per resample and data point,
//! mock series); they are lower bounds of the real use, which is the safe side for a refusal.

/// The memory formfactory may plan to use, in bytes: three quarters of the smaller of the
/// machine's physical memory and the process's address-space limit (`ulimit -v`), leaving
/// room for everything the estimates do not count. `None` when neither can be read.
pub fn limit() -> Option<u64> {
    let physical = physical_memory();
    let rlimit = address_space_limit();
    let smallest = match (physical, rlimit) {
        (Some(a), Some(b)) => a.min(b),
        (a, b) => a.or(b)?,
    };
    Some(smallest / 4 * 3)
}

fn physical_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb.saturating_mul(1024))
}

#[cfg(unix)]
// `rlim_t` is `u64` on 64-bit Linux but not on every platform, so the cast stays.
#[allow(clippy::unnecessary_cast)]
fn address_space_limit() -> Option<u64> {
    let mut lim = libc::rlimit {
        rlim_cur: 0,
        rlim_max: 0,
    };
    // SAFETY: getrlimit writes into the struct it is given.
    let rc = unsafe { libc::getrlimit(libc::RLIMIT_AS, &mut lim) };
    (rc == 0 && lim.rlim_cur != libc::RLIM_INFINITY).then_some(lim.rlim_cur)
}

#[cfg(not(unix))]
fn address_space_limit() -> Option<u64> {
    None
}

/// Bytes as a short human-readable amount.
pub fn human(bytes: u64) -> String {
    const UNITS: [&str; 6] = ["B", "kB", "MB", "GB", "TB", "PB"];
    let mut v = bytes as f64;
    let mut u = 0;
    while v >= 1000.0 && u + 1 < UNITS.len() {
        v /= 1000.0;
        u += 1;
    }
    if u == 0 {
        format!("{bytes} B")
    } else {
        format!("{v:.1} {}", UNITS[u])
    }
}

/// `Err` with a sentence naming `what`, the estimate and the limit when `estimate` bytes do
/// not fit in [`limit`]; `Ok` when they do or when the limit is unknown.
pub fn check(what: &str, estimate: u64) -> Result<(), String> {
    match limit() {
        Some(limit) if estimate > limit => Err(format!(
            "{what} would need about {} of memory, more than the {} this machine allows \
             (three quarters of its memory or of the process limit); reduce the setting",
            human(estimate),
            human(limit)
        )),
        _ => Ok(()),
    }
}

/// `a * b * c * ...` saturating at `u64::MAX`.
pub fn product(factors: &[u64]) -> u64 {
    factors.iter().fold(1u64, |acc, &f| acc.saturating_mul(f))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn huge_estimates_are_refused_small_ones_pass() {
        assert!(check("test", product(&[1 << 40, 1 << 40])).is_err());
        assert!(check("test", 1024).is_ok());
        assert_eq!(human(1_500_000), "1.5 MB");
        assert_eq!(product(&[u64::MAX, 2]), u64::MAX);
    }
}
