//! Progress of long steps on standard error, on a terminal and in logs alike.
//!
//! On a terminal a step shows a bar with elapsed and remaining time (indicatif). When standard
//! error is not a terminal (a cluster log, `2> log`), the bar would draw nothing, so the step
//! writes a plain line instead, at most every [`LINE_INTERVAL`] and once at the end:
//!
//! ```text
//! progress: fitting 120/958 (12.5 %), elapsed 0:00:31, time left 0:03:36
//! ```
//!
//! Progress only reports: it never changes what a command computes. A caller that shows
//! progress its own way (the Python package, in a notebook) reads the latest step with
//! [`latest`].
//!
//! The one way to end a long step early is [`request_stop`] (the Python package calls it on
//! Ctrl-C): the per-subject fits check it before each subject and the EM before each iteration,
//! and the command then fails with [`Stopped`] before writing anything.

use indicatif::{ProgressBar, ProgressStyle};
use std::io::IsTerminal;
use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// What the step that reported last says: its name, units done and total.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Step {
    /// The step's name ("fitting").
    pub what: String,
    /// Units done.
    pub done: u64,
    /// Units in all.
    pub total: u64,
}

static LATEST: Mutex<Option<Step>> = Mutex::new(None);

/// The step that reported last in this process, if any (the last state of a finished step stays
/// until the next step starts).
pub fn latest() -> Option<Step> {
    lock(&LATEST).clone()
}

static STOP: AtomicBool = AtomicBool::new(false);

/// Asks the running command to stop at its next check; it then writes nothing and fails with
/// [`Stopped`]. Stays set until [`clear_stop`].
pub fn request_stop() {
    STOP.store(true, Ordering::SeqCst);
}

/// Whether [`request_stop`] was called since the last [`clear_stop`].
pub fn stop_requested() -> bool {
    STOP.load(Ordering::SeqCst)
}

/// Forgets an earlier [`request_stop`] (before a new command starts).
pub fn clear_stop() {
    STOP.store(false, Ordering::SeqCst);
}

/// A command that stopped because [`request_stop`] was called.
#[derive(Clone, Copy, Debug, PartialEq, Eq, thiserror::Error)]
#[error("interrupted: stopped before the end, nothing was written")]
pub struct Stopped;

/// Least time between two progress lines in a log.
pub const LINE_INTERVAL: Duration = Duration::from_secs(10);

/// The progress of one step of `total` units (subjects, files, iterations).
pub struct Progress {
    step: Mutex<Step>,
    shown: Shown,
}

enum Shown {
    /// Standard error is a terminal.
    Bar(ProgressBar),
    /// Standard error goes to a file or pipe.
    Lines(Lines),
}

struct Lines {
    detail: Mutex<String>,
    times: Mutex<Times>,
}

impl Progress {
    /// Starts a step called `what` (e.g. "fitting") over `total` units.
    pub fn new(what: &str, total: usize) -> Self {
        let shown = if std::io::stderr().is_terminal() {
            let bar = ProgressBar::new(total as u64);
            bar.set_style(
                ProgressStyle::with_template(
                    "{prefix} {bar:30} {pos}/{len} [{elapsed_precise} elapsed, {eta} left] {msg}",
                )
                .unwrap_or_else(|_| ProgressStyle::default_bar()),
            );
            bar.set_prefix(what.to_string());
            Shown::Bar(bar)
        } else {
            Shown::Lines(Lines {
                detail: Mutex::new(String::new()),
                times: Mutex::new(Times::now()),
            })
        };
        let progress = Progress {
            step: Mutex::new(Step {
                what: what.to_string(),
                done: 0,
                total: total as u64,
            }),
            shown,
        };
        progress.publish(|_| {});
        progress
    }

    /// Changes the step with `change` and makes it the [`latest`].
    fn publish(&self, change: impl FnOnce(&mut Step)) -> Step {
        let mut step = lock(&self.step);
        change(&mut step);
        let copy = step.clone();
        *lock(&LATEST) = Some(copy.clone());
        copy
    }

    /// One more unit done.
    pub fn inc(&self) {
        let step = self.publish(|s| s.done += 1);
        match &self.shown {
            Shown::Bar(bar) => bar.inc(1),
            Shown::Lines(lines) => lines.maybe_write(&step, false),
        }
    }

    /// Restarts the step under a new name and total (the clock restarts too): for steps that come
    /// one after another, such as the EM of one model and group after another. In a log the old
    /// step gets its final line first.
    pub fn restart(&self, what: &str, total: usize) {
        let old = lock(&self.step).clone();
        self.publish(|s| {
            *s = Step {
                what: what.to_string(),
                done: 0,
                total: total as u64,
            }
        });
        match &self.shown {
            Shown::Bar(bar) => {
                bar.set_prefix(what.to_string());
                bar.set_length(total as u64);
                bar.reset();
            }
            Shown::Lines(lines) => {
                if old.done > 0 {
                    lines.maybe_write(&old, true);
                }
                *lock(&lines.times) = Times::now();
            }
        }
    }

    /// Sets the units done to `done` and a detail shown after the counts (e.g. the change of the
    /// last EM iteration).
    pub fn set(&self, done: usize, detail: &str) {
        let step = self.publish(|s| s.done = done as u64);
        match &self.shown {
            Shown::Bar(bar) => {
                bar.set_position(done as u64);
                bar.set_message(detail.to_string());
            }
            Shown::Lines(lines) => {
                *lock(&lines.detail) = detail.to_string();
                lines.maybe_write(&step, false);
            }
        }
    }

    /// Ends the step: clears the bar, or writes the final line if the last one was not final.
    pub fn finish(&self) {
        match &self.shown {
            Shown::Bar(bar) => bar.finish_and_clear(),
            Shown::Lines(lines) => lines.maybe_write(&lock(&self.step).clone(), true),
        }
    }
}

impl Lines {
    /// Writes a line when the step is complete or ends (once), or when the last line is older
    /// than [`LINE_INTERVAL`].
    fn maybe_write(&self, step: &Step, end: bool) {
        let (done, total) = (step.done, step.total);
        let last_one = done >= total || end;
        let now = Instant::now();
        let mut times = lock(&self.times);
        let due = if last_one {
            !times.finished
        } else {
            now.duration_since(times.last.unwrap_or(times.start)) >= LINE_INTERVAL
        };
        if !due {
            return;
        }
        times.last = Some(now);
        times.finished = last_one;
        let elapsed = now.duration_since(times.start);
        drop(times);
        let detail = lock(&self.detail).clone();
        eprintln!(
            "{}",
            progress_line(&step.what, done, total, elapsed, last_one, &detail)
        );
    }
}

/// When a step started, when its last line was written, and whether its final line was.
struct Times {
    start: Instant,
    last: Option<Instant>,
    finished: bool,
}

impl Times {
    fn now() -> Self {
        Times {
            start: Instant::now(),
            last: None,
            finished: false,
        }
    }
}

/// Progress of iterative fits that run one after another, each up to a most number of
/// iterations and possibly stopping earlier (the EM of `fit --hierarchical`, one model and group
/// after another). The count is out of the most iterations, so the time left is an upper bound.
pub struct Iterations {
    what: String,
    most: usize,
    progress: Progress,
    current: Mutex<Option<String>>,
}

impl Iterations {
    /// Progress of steps called `what` followed by their scope, each of at most `most` iterations.
    pub fn new(what: &str, most: usize) -> Self {
        Iterations {
            what: what.to_string(),
            most,
            progress: Progress::new(what, most),
            current: Mutex::new(None),
        }
    }

    /// Iteration `iteration` of `scope` is done, and the convergence measure changed by `change`.
    pub fn report(&self, scope: &str, iteration: usize, change: f64) {
        let mut current = lock(&self.current);
        if current.as_deref() != Some(scope) {
            self.progress
                .restart(&format!("{} {scope}", self.what), self.most);
            *current = Some(scope.to_string());
        }
        self.progress.set(
            iteration,
            &format!("last change {change:.2e} (stops earlier once below the tolerance)"),
        );
    }

    /// Ends the progress of the last scope.
    pub fn finish(&self) {
        if lock(&self.current).is_some() {
            self.progress.finish();
        }
    }
}

/// Locks a mutex whose holder may have panicked (progress text stays usable).
fn lock<T>(m: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}

/// One progress line: `progress: WHAT DONE/TOTAL (P %), elapsed H:MM:SS, time left H:MM:SS`,
/// then `, DETAIL` when there is one. The time left assumes the remaining units take as long as
/// the done ones on average; it is "unknown" before the first unit is done, and zero once the
/// step has `ended` (also when it ended before the total, as EM does when it converges).
pub fn progress_line(
    what: &str,
    done: u64,
    total: u64,
    elapsed: Duration,
    ended: bool,
    detail: &str,
) -> String {
    let percent = if total == 0 {
        100.0
    } else {
        100.0 * done.min(total) as f64 / total as f64
    };
    let left = if ended || done >= total {
        clock(Duration::ZERO)
    } else if done == 0 {
        "unknown".to_string()
    } else {
        clock(elapsed.mul_f64((total - done) as f64 / done as f64))
    };
    let mut line = format!(
        "progress: {what} {done}/{total} ({percent:.1} %), elapsed {}, time left {left}",
        clock(elapsed)
    );
    if !detail.is_empty() {
        line.push_str(", ");
        line.push_str(detail);
    }
    line
}

/// A duration as H:MM:SS (whole seconds, rounded down).
fn clock(d: Duration) -> String {
    let s = d.as_secs();
    format!("{}:{:02}:{:02}", s / 3600, (s / 60) % 60, s % 60)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_format_and_time_left() {
        // 30 of 120 units in 60 s: the remaining 90 take 180 s at the same rate (arithmetic).
        let line = progress_line("fitting", 30, 120, Duration::from_secs(60), false, "");
        assert_eq!(
            line,
            "progress: fitting 30/120 (25.0 %), elapsed 0:01:00, time left 0:03:00"
        );
        let end = progress_line("exporting", 7, 7, Duration::from_secs(3725), false, "x");
        assert_eq!(
            end,
            "progress: exporting 7/7 (100.0 %), elapsed 1:02:05, time left 0:00:00, x"
        );
        let start = progress_line("simulating", 0, 4, Duration::from_secs(1), false, "");
        assert!(start.ends_with("time left unknown"), "{start}");
        // A step that ended early (EM converged at iteration 14 of at most 200) has nothing left.
        let early = progress_line("EM", 14, 200, Duration::from_secs(2), true, "");
        assert!(
            early.ends_with("(7.0 %), elapsed 0:00:02, time left 0:00:00"),
            "{early}"
        );
    }
}
