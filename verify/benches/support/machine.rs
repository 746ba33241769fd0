//! What the `verify` benchmarks say about the machine and the process: the machine line, the
//! load average, file sizes, and the wall-clock and CPU time of a phase ([`Cost`]), all from
//! Linux `/proc` (an unknown value shows as "unknown" or `None`, never as an error).
//!
//! Shared by `recompute.rs` and `validate.rs`, which include it with `#[path]`.

use std::path::Path;
use std::time::{Duration, Instant};

/// Prints the machine line (cores, CPU model, kernel) and the load average at the start.
pub fn print_machine() {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let model = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, v)| v.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into());
    let kernel = std::fs::read_to_string("/proc/sys/kernel/osrelease")
        .map(|k| k.trim().to_string())
        .unwrap_or_else(|_| "unknown".into());
    println!("machine: nproc {cores}, {model}, kernel {kernel}");
    println!("load average at start: {}", load_average());
}

/// The 1-, 5- and 15-minute load averages, to show whether the machine was busy.
pub fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|text| {
            text.split_whitespace()
                .take(3)
                .collect::<Vec<_>>()
                .join(" ")
        })
        .unwrap_or_else(|_| "unknown".into())
}

/// The size of a file in MiB (0 if it cannot be read).
pub fn file_mib(path: &Path) -> f64 {
    std::fs::metadata(path).map_or(0.0, |m| m.len() as f64 / (1024.0 * 1024.0))
}

/// User plus system CPU time of this process so far, all threads (finished ones included),
/// from `/proc/self/stat` in clock ticks of 10 ms (Linux `USER_HZ` = 100).
fn process_cpu() -> Option<Duration> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    let after_name = &stat[stat.rfind(')')? + 1..];
    let fields: Vec<&str> = after_name.split_whitespace().collect();
    let user: u64 = fields.get(11)?.parse().ok()?;
    let system: u64 = fields.get(12)?.parse().ok()?;
    Some(Duration::from_millis((user + system) * 10))
}

/// Wall-clock time of one phase and the CPU time (user + system, all threads) it used.
#[derive(Clone, Copy)]
pub struct Cost {
    /// Wall-clock time.
    pub wall: Duration,
    /// User + system CPU time of all threads, if `/proc` gives it.
    pub cpu: Option<Duration>,
}

impl Cost {
    /// No measurement yet: slower than any.
    pub const NONE: Cost = Cost {
        wall: Duration::MAX,
        cpu: None,
    };

    /// Runs `phase`, measuring its wall-clock and CPU time.
    pub fn of<T, E>(phase: impl FnOnce() -> Result<T, E>) -> Result<(Cost, T), E> {
        let cpu_before = process_cpu();
        let started = Instant::now();
        let value = phase()?;
        let wall = started.elapsed();
        let cpu = match (cpu_before, process_cpu()) {
            (Some(before), Some(after)) => Some(after.saturating_sub(before)),
            _ => None,
        };
        Ok((Cost { wall, cpu }, value))
    }

    /// The faster of two measurements of the same phase.
    pub fn best(self, other: Cost) -> Cost {
        if other.wall < self.wall {
            other
        } else {
            self
        }
    }
}
