//! The terminal's observer of long stages: an indicatif bar per stage and,
//! where the stage can stop cleanly, Ctrl-C as the stop request.

use std::sync::Mutex;
use std::sync::atomic::Ordering;

use latens::progress::{Observer, Stage};

/// Draws a bar for each stage on standard error (hidden when it is not a
/// terminal, as indicatif does) and, if `interruptible`, passes Ctrl-C on as
/// a stop request.
pub struct Bars {
    bar: Mutex<Option<indicatif::ProgressBar>>,
    interruptible: bool,
}

impl Bars {
    /// Bars without stop requests: Ctrl-C keeps its default meaning.
    pub fn new() -> Self {
        Bars { bar: Mutex::new(None), interruptible: false }
    }

    /// Bars with Ctrl-C as the stop request (installs the handler).
    pub fn interruptible() -> Self {
        let _ = super::interrupt_flag();
        Bars { bar: Mutex::new(None), interruptible: true }
    }

    fn with_bar(&self, f: impl FnOnce(&indicatif::ProgressBar)) {
        if let Some(bar) = self.bar.lock().unwrap_or_else(|p| p.into_inner()).as_ref() {
            f(bar);
        }
    }
}

impl Observer for Bars {
    fn begin(&self, stage: Stage, total: u64) {
        if super::quiet() {
            return;
        }
        // A stage that cannot know its length (total 0) counts without an
        // estimate rather than showing a false one.
        let (bar, template) = if total == 0 {
            (
                indicatif::ProgressBar::new_spinner(),
                format!("{} {{spinner}} {{pos}} {}", stage.describe(), stage.unit()),
            )
        } else {
            (
                indicatif::ProgressBar::new(total),
                format!("{} {{bar:40}} {{pos}}/{{len}} {} ({{eta}} left)", stage.describe(), stage.unit()),
            )
        };
        bar.set_style(
            indicatif::ProgressStyle::with_template(&template)
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        *self.bar.lock().unwrap_or_else(|p| p.into_inner()) = Some(bar);
    }

    fn advance(&self, done: u64) {
        self.with_bar(|b| {
            if done > b.position() {
                b.set_position(done)
            }
        });
    }

    fn finish(&self) {
        if let Some(bar) = self.bar.lock().unwrap_or_else(|p| p.into_inner()).take() {
            bar.finish_and_clear();
        }
    }

    fn note(&self, text: &str) {
        if !super::quiet() {
            eprintln!("{text}");
        }
    }

    fn stop_requested(&self) -> bool {
        self.interruptible && super::interrupt_flag().load(Ordering::SeqCst)
    }
}
