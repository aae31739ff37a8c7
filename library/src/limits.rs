//! Upper bounds on what a cell may ask for, and the memory check behind them.
//!
//! A size written in a cell (`rows`, `draws`, `reps`, `chains`, basis
//! functions) becomes an allocation further down. A mistyped
//! `10000000000` must be refused with one sentence that says how much memory
//! it would take and how much the machine has, instead of aborting the
//! process when the allocation fails. Numbers that a setting stores in a
//! narrower type are read with their range, so `doublings 4294967297` is an
//! error rather than a silent wrap to 1.
//!
//! The memory the machine has is read from `/proc/meminfo` (`MemAvailable`),
//! lowered to what a cgroup v2 cap (`/sys/fs/cgroup/memory.max`) leaves;
//! where `/proc/meminfo` does not exist a fixed [`ASSUMED_MEMORY`] stands in.

/// The most NUTS chains one fit may run (each is a thread's work and a
/// full set of draws).
pub const MAX_CHAINS: u64 = 64;
/// The most settling iterations per chain.
pub const MAX_SETTLE: u64 = 1_000_000;
/// The most doublings of a NUTS trajectory (it then has up to 2^30 steps).
pub const MAX_DOUBLINGS: u64 = 30;

/// Bytes of one stored number (`f64`).
pub const VALUE_BYTES: u128 = 8;

/// The memory assumed available where the system does not say.
pub const ASSUMED_MEMORY: u64 = 4 << 30;

/// The share of the available memory one request may take: the rest is left
/// for the session's tables, draws and figures.
const SHARE: f64 = 0.5;

/// Bytes of memory available to the process now: the system's available
/// memory, or less when a control group (a container) caps the process.
pub fn available_memory() -> u64 {
    let system = std::fs::read_to_string("/proc/meminfo").ok().and_then(|text| mem_available(&text)).unwrap_or(ASSUMED_MEMORY);
    let read = |file: &str| std::fs::read_to_string(format!("/sys/fs/cgroup/{file}")).ok();
    match (read("memory.max").as_deref().and_then(cgroup_bytes), read("memory.current").as_deref().and_then(cgroup_bytes)) {
        (Some(cap), Some(used)) => system.min(cap.saturating_sub(used)),
        _ => system,
    }
}

/// A byte count from a cgroup file; `None` for "max" (no cap) or an unreadable value.
fn cgroup_bytes(text: &str) -> Option<u64> {
    text.trim().parse().ok()
}

/// The `MemAvailable` line of a `/proc/meminfo` text, in bytes.
fn mem_available(text: &str) -> Option<u64> {
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    kib.checked_mul(1024)
}

/// `Ok` when `bytes` fit in this request's share of the available memory;
/// otherwise a sentence that starts with `what` ("2000000000 rows of 5
/// nodes"), gives the estimate and the memory available, and says what to do.
pub fn check_memory(what: &str, bytes: u128) -> Result<(), String> {
    check_memory_against(what, bytes, available_memory())
}

/// [`check_memory`] against a given amount of available memory.
pub fn check_memory_against(what: &str, bytes: u128, available: u64) -> Result<(), String> {
    let allowed = available as f64 * SHARE;
    if (bytes as f64) <= allowed {
        return Ok(());
    }
    Err(format!(
        "{what} would need about {} of memory, but this machine has {} available; ask for less",
        describe_bytes(bytes as f64),
        describe_bytes(available as f64)
    ))
}

/// Bytes as a short figure in KB, MB, GB, TB or more.
pub fn describe_bytes(bytes: f64) -> String {
    let units = ["bytes", "KB", "MB", "GB", "TB", "PB", "EB"];
    let mut value = bytes;
    let mut unit = 0;
    while value >= 1000.0 && unit + 1 < units.len() {
        value /= 1000.0;
        unit += 1;
    }
    if unit == 0 {
        format!("{value:.0} {}", units[0])
    } else if value >= 1000.0 {
        format!("{value:.3e} {}", units[unit])
    } else {
        format!("{value:.1} {}", units[unit])
    }
}

/// The product of several counts as a byte estimate (never overflows).
pub fn bytes_for(counts: &[usize]) -> u128 {
    counts.iter().fold(VALUE_BYTES, |acc, &n| acc.saturating_mul(n as u128))
}

/// Read a whole number for option `key`, which must lie in `low..=high`.
pub fn whole_number(key: &str, text: &str, low: u64, high: u64) -> Result<u64, String> {
    let digits = text.strip_prefix('+').unwrap_or(text);
    let all_digits = !digits.is_empty() && digits.chars().all(|c| c.is_ascii_digit());
    let value = if all_digits { digits.parse::<u64>().ok() } else { None };
    let top = if high == u64::MAX { "2^64 − 1".to_string() } else { high.to_string() };
    match value {
        Some(v) if (low..=high).contains(&v) => Ok(v),
        Some(_) | None if all_digits => Err(format!("{key} takes a whole number from {low} to {top}, not {text}")),
        _ => Err(format!("{key} takes a whole number from {low} to {top}, not \"{text}\"")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn meminfo_line_is_read_in_kibibytes() {
        // /proc/meminfo reports kB meaning KiB (proc(5) manual page, recalled).
        let text = "MemTotal:       16384000 kB\nMemFree:  100 kB\nMemAvailable:    2048 kB\n";
        assert_eq!(mem_available(text), Some(2048 * 1024));
        assert_eq!(mem_available("MemTotal: 5 kB\n"), None);
    }

    #[test]
    fn a_cgroup_cap_of_max_means_no_cap() {
        // cgroup v2 writes "max" for no limit (kernel cgroup-v2 documentation, recalled).
        assert_eq!(cgroup_bytes("max\n"), None);
        assert_eq!(cgroup_bytes("1073741824\n"), Some(1 << 30));
    }

    #[test]
    fn requests_above_half_the_memory_are_refused_with_both_figures() {
        // 10^10 rows of 3 numbers of 8 bytes = 2.4e11 bytes = 240 GB.
        let error = check_memory_against("10000000000 rows", bytes_for(&[10_000_000_000, 3]), 8_000_000_000).unwrap_err();
        assert!(error.contains("240.0 GB") && error.contains("8.0 GB available"), "{error}");
        assert!(check_memory_against("a few rows", bytes_for(&[1000, 3]), 8_000_000_000).is_ok());
    }

    #[test]
    fn whole_numbers_outside_their_range_are_errors_not_wrapped() {
        // 4294967297 = 2^32 + 1 wraps to 1 in a 32-bit cast (two's complement arithmetic).
        assert!(whole_number("depth", "4294967297", 1, 30).unwrap_err().contains("from 1 to 30"));
        assert_eq!(whole_number("depth", "12", 1, 30), Ok(12));
        assert!(whole_number("seed", "-3", 0, u64::MAX).is_err());
        assert!(whole_number("seed", "99999999999999999999999", 0, u64::MAX).unwrap_err().contains("not 9999"));
    }
}
