//! Terminal-side helpers: a progress bar that also carries Ctrl-C cancellation, and file writes
//! that never leave a partial file behind.

use patchgraph::Progress;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

pub struct TerminalProgress {
    bar: indicatif::ProgressBar,
    cancelled: Arc<AtomicBool>,
}

impl TerminalProgress {
    /// A bar on stderr (drawn only when stderr is a terminal and `show`), cancelled by Ctrl-C.
    pub fn new(show: bool) -> Self {
        let cancelled = Arc::new(AtomicBool::new(false));
        let flag = cancelled.clone();
        // If a handler is already set (a second run in one process), keep the first.
        let _ = ctrlc::set_handler(move || flag.store(true, Ordering::SeqCst));
        let bar = if show { indicatif::ProgressBar::new(1000) } else { indicatif::ProgressBar::hidden() };
        if let Ok(style) = indicatif::ProgressStyle::with_template("{bar:40} {percent:>3}% {msg} ({elapsed})") {
            bar.set_style(style);
        }
        TerminalProgress { bar, cancelled }
    }

    pub fn finish(&self) {
        self.bar.finish_and_clear();
    }
}

impl Progress for TerminalProgress {
    fn report(&self, fraction: f32, stage: &str) {
        self.bar.set_position((fraction.clamp(0.0, 1.0) * 1000.0) as u64);
        self.bar.set_message(stage.to_string());
    }
    fn is_cancelled(&self) -> bool {
        self.cancelled.load(Ordering::SeqCst)
    }
}

/// Writes to a temporary name beside the target, then renames: readers see the whole file or none.
pub fn write_atomically(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or_else(|| Path::new("."));
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let tmp: PathBuf = dir.join(format!(".{name}.partial-{}", std::process::id()));
    let result = std::fs::write(&tmp, bytes).and_then(|_| std::fs::rename(&tmp, path));
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}
