//! CPU seconds of the process, for the benches: the sum over its threads of the time the
//! scheduler ran them (`/proc/self/task/*/schedstat`, nanoseconds; Linux). Rayon's workers live
//! as long as the process, so differences of this sum are the CPU seconds of what ran between.
//! Elsewhere `None`, and the benches print wall seconds only.

use std::fs;

pub fn cpu_seconds() -> Option<f64> {
    let mut total_ns: u64 = 0;
    for entry in fs::read_dir("/proc/self/task").ok()? {
        let path = entry.ok()?.path().join("schedstat");
        let text = fs::read_to_string(path).ok()?;
        total_ns += text.split_whitespace().next()?.parse::<u64>().ok()?;
    }
    Some(total_ns as f64 * 1e-9)
}

/// Runs `f`, returns its result, wall seconds and CPU seconds (NaN when unknown).
pub fn measure<T>(f: impl FnOnce() -> T) -> (T, f64, f64) {
    let c0 = cpu_seconds();
    let t0 = std::time::Instant::now();
    let out = f();
    let wall = t0.elapsed().as_secs_f64();
    let cpu = match (c0, cpu_seconds()) {
        (Some(a), Some(b)) => b - a,
        _ => f64::NAN,
    };
    (out, wall, cpu)
}
