//! Progress on stderr: an indicatif bar on a terminal, plain lines otherwise.

use assay::progress::Observer;
use indicatif::{ProgressBar, ProgressStyle};
use std::io::IsTerminal;
use std::sync::atomic::{AtomicU64, Ordering};

/// Progress on stderr: an indicatif bar on a terminal, plain lines otherwise (logs,
/// batch jobs).
struct Bar {
    bar: ProgressBar,
    plain: bool,
    task: std::sync::Mutex<String>,
    total: AtomicU64,
    pos: AtomicU64,
}

impl Bar {
    fn new(plain: bool) -> Self {
        Self {
            bar: ProgressBar::hidden(),
            plain: plain || !std::io::stderr().is_terminal(),
            task: std::sync::Mutex::new(String::new()),
            total: AtomicU64::new(0),
            pos: AtomicU64::new(0),
        }
    }
}

/// Plain progress lines: about this many per task.
const PLAIN_LINES: u64 = 10;

impl Observer for Bar {
    fn start(&self, task: &str, total: u64) {
        *self.task.lock().expect("task lock") = task.to_string();
        self.total.store(total, Ordering::SeqCst);
        self.pos.store(0, Ordering::SeqCst);
        if self.plain {
            eprintln!("{task}: {total} to do");
            return;
        }
        self.bar
            .set_draw_target(indicatif::ProgressDrawTarget::stderr());
        self.bar.set_length(total);
        self.bar.set_position(0);
        self.bar.set_style(
            ProgressStyle::with_template(
                "{prefix:>10} [{bar:30}] {pos}/{len} {msg} ({elapsed}, eta {eta})",
            )
            .expect("valid template")
            .progress_chars("=> "),
        );
        self.bar.set_prefix(task.to_string());
        self.bar.reset_elapsed();
    }
    fn advance(&self, n: u64, message: &str) {
        if self.plain {
            let total = self.total.load(Ordering::SeqCst).max(1);
            let before = self.pos.fetch_add(n, Ordering::SeqCst);
            let after = before + n;
            let step = (total / PLAIN_LINES).max(1);
            if after / step != before / step || after == total {
                let task = self.task.lock().expect("task lock").clone();
                eprintln!("{task}: {after}/{total} {message}");
            }
            return;
        }
        self.bar.inc(n);
        if !message.is_empty() {
            self.bar.set_message(message.to_string());
        }
    }
    fn note(&self, message: &str) {
        if self.plain {
            eprintln!("  {message}");
        } else {
            self.bar.suspend(|| eprintln!("  {message}"));
        }
    }
    fn finish(&self) {
        if !self.plain {
            self.bar.finish_and_clear();
        }
    }
}

pub fn observer(quiet: bool) -> Box<dyn Observer> {
    // --quiet: no bar, a few plain lines (as off a terminal).
    Box::new(Bar::new(quiet))
}
