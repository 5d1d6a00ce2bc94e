//! Progress bars on stderr for the library's long stages (the library reports through
//! `hopmap::landscape::ProgressSink` and knows nothing of terminals).

use hopmap::landscape::ProgressSink;
use std::sync::Mutex;

/// Grids smaller than this finish in about a second: no bar.
const BAR_FROM_POINTS: u64 = 1_000_000;

/// A bar per stage, drawn only for grids above [`BAR_FROM_POINTS`] points; never cancels.
#[derive(Default)]
pub struct Bar {
    bar: Mutex<Option<(&'static str, indicatif::ProgressBar)>>,
}

impl ProgressSink for Bar {
    fn update(&self, stage: &'static str, done: u64, total: u64, points: u64) -> bool {
        if points <= BAR_FROM_POINTS {
            return true;
        }
        let Ok(mut slot) = self.bar.lock() else {
            return true;
        };
        if slot.as_ref().is_none_or(|(s, _)| *s != stage) {
            let pb = indicatif::ProgressBar::new(total);
            if let Ok(style) = indicatif::ProgressStyle::with_template(&format!(
                "{stage} {{bar:40}} {{percent:>3}}% of {{len}} blocks, {{eta}} left"
            )) {
                pb.set_style(style);
            }
            *slot = Some((stage, pb));
        }
        if let Some((_, pb)) = slot.as_ref() {
            pb.set_position(done);
            if done >= total {
                pb.finish_and_clear();
            }
        }
        true
    }
}
