//! Progress bars for long steps, drawn only when stderr is a terminal and the user did
//! not ask for quiet output (so logs of batch jobs stay clean).

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Hands out one bar per stage; a disabled `Progress` hands out hidden bars.
#[derive(Clone, Copy, Debug, Default)]
pub struct Progress {
    pub enabled: bool,
    /// Told about every stage bar (hidden ones too), so a caller other than a terminal (the
    /// web workspace) can follow a long step by reading the bar's position.
    pub observer: Option<fn(&str, &ProgressBar)>,
}

impl Progress {
    pub fn new(enabled: bool) -> Self {
        Progress {
            enabled,
            observer: None,
        }
    }

    /// No terminal output; `observer` receives each stage's (hidden) bar.
    pub fn observed(observer: fn(&str, &ProgressBar)) -> Self {
        Progress {
            enabled: false,
            observer: Some(observer),
        }
    }

    /// A bar for `total` steps of the named stage.
    pub fn stage(&self, name: &str, total: u64) -> ProgressBar {
        if let Some(observe) = self.observer {
            let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::hidden());
            observe(name, &bar);
            return bar;
        }
        if !self.enabled {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{prefix:>12} [{bar:30}] {pos}/{len} {msg} ({elapsed})")
                .expect("static template")
                .progress_chars("=> "),
        );
        bar.set_prefix(name.to_string());
        bar
    }

    /// A bar over the images of a batch; the caller puts the throughput in its message
    /// (`set_message`), the ETA comes from the images done so far.
    pub fn images(&self, name: &str, total: u64) -> ProgressBar {
        if !self.enabled {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template(
                "{prefix:>12} [{bar:30}] {pos}/{len} images {msg} ETA {eta} ({elapsed})",
            )
            .expect("static template")
            .progress_chars("=> "),
        );
        bar.set_prefix(name.to_string());
        bar
    }

    /// A spinner for a step whose length is unknown (forest training).
    pub fn spinner(&self, name: &str) -> ProgressBar {
        if let Some(observe) = self.observer {
            let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::hidden());
            observe(name, &bar);
            return bar;
        }
        if !self.enabled {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template("{prefix:>12} {spinner} {msg} ({elapsed})")
                .expect("static template"),
        );
        bar.set_prefix(name.to_string());
        bar.enable_steady_tick(std::time::Duration::from_millis(120));
        bar
    }
}
