//! Opt-in stage timing for performance work: with `KNOTWISE_PROFILE=1` in the environment, each timed
//! stage prints one line `knotwise-profile: <stage> <seconds> s (rss <MB> MB)` to stderr when it ends
//! (resident memory where /proc/self/statm can be read). Off by default;
//! it never touches any result or output file (timings are not deterministic and must not be hashed).

use std::sync::OnceLock;
use std::time::Instant;

/// Whether `KNOTWISE_PROFILE` is set to a non-empty value other than `0`.
pub fn enabled() -> bool {
    static ON: OnceLock<bool> = OnceLock::new();
    *ON.get_or_init(|| std::env::var("KNOTWISE_PROFILE").is_ok_and(|v| !v.is_empty() && v != "0"))
}

/// A running stage timer; prints its elapsed time on drop when profiling is enabled.
pub struct Stage {
    name: Option<String>,
    start: Instant,
}

/// Start timing a stage. The name is built only when profiling is on.
pub fn stage(name: impl FnOnce() -> String) -> Stage {
    Stage { name: if enabled() { Some(name()) } else { None }, start: Instant::now() }
}

impl Drop for Stage {
    fn drop(&mut self) {
        if let Some(name) = &self.name {
            eprintln!("knotwise-profile: {name} {:.3} s{}", self.start.elapsed().as_secs_f64(), resident());
        }
    }
}

/// " (rss N MB)" from /proc/self/statm (resident pages × 4 KiB), or nothing where that is unavailable.
fn resident() -> String {
    std::fs::read_to_string("/proc/self/statm")
        .ok()
        .and_then(|t| t.split_whitespace().nth(1).and_then(|v| v.parse::<u64>().ok()))
        .map_or_else(String::new, |pages| format!(" (rss {} MB)", pages * 4096 / 1_000_000))
}
