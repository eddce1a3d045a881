//! A child process timed as a user would see it: wall time, its own CPU times and its peak
//! resident memory. Shared by the benchmarks that run the release binary
//! (`end_to_end.rs`, `raster_end_to_end.rs`), each of which includes this file as a module.

use std::process::Command;
use std::time::Instant;

/// Resources a finished child used (`wait4`).
pub struct Usage {
    /// Seconds from spawn to exit.
    pub wall: f64,
    /// The child's user CPU seconds.
    pub user: f64,
    /// The child's system CPU seconds.
    pub sys: f64,
    /// The child's peak resident set, bytes.
    pub peak_rss_bytes: f64,
    /// It exited with status 0.
    pub success: bool,
}

/// Runs `cmd` and waits for it with `wait4`, which reports the child's own CPU times and peak
/// resident set (Linux: `ru_maxrss` in kilobytes, getrusage(2)).
#[allow(unsafe_code)]
pub fn run(cmd: &mut Command) -> Usage {
    let start = Instant::now();
    let child = cmd.spawn().expect("the command starts");
    let pid = child.id() as libc::pid_t;
    let mut status: libc::c_int = 0;
    // SAFETY: `rusage` is plain data that wait4 fills; `pid` is our child, not yet reaped
    // (std's `Child` is never waited on: dropping it does not reap).
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    let got = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let wall = start.elapsed().as_secs_f64();
    assert_eq!(
        got,
        pid,
        "wait4 failed: {}",
        std::io::Error::last_os_error()
    );
    drop(child);
    let secs = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    Usage {
        wall,
        user: secs(usage.ru_utime),
        sys: secs(usage.ru_stime),
        peak_rss_bytes: usage.ru_maxrss as f64 * 1024.0,
        success: libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0,
    }
}

/// The 1-, 5- and 15-minute load averages (`/proc/loadavg`), or "unknown".
pub fn load() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|l| l.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".to_string())
}
