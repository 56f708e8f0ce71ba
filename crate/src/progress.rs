//! Progress reporting and cancellation, called by the algorithms at natural checkpoints
//! (solver iterations, rows of tiles). Faces implement it: a terminal bar, a worker message.

/// `Sync` so that tiles running on several threads can report through one reporter.
pub trait Progress: Sync {
    /// `fraction` is in [0, 1] for the whole run; `stage` names the current step in plain words.
    fn report(&self, fraction: f32, stage: &str);
    /// Polled often; when true the algorithm stops and returns `Error::Cancelled`.
    fn is_cancelled(&self) -> bool;
}

/// For callers that want neither progress nor cancellation.
pub struct NoProgress;

impl Progress for NoProgress {
    fn report(&self, _fraction: f32, _stage: &str) {}
    fn is_cancelled(&self) -> bool {
        false
    }
}

/// Maps the progress of one step onto its share [start, start + span] of the whole run.
pub struct SubProgress<'a> {
    /// The progress this one reports into.
    pub parent: &'a dyn Progress,
    /// Where this part starts in the parent's 0 to 1.
    pub start: f32,
    /// How much of the parent's 0 to 1 this part covers.
    pub span: f32,
}

impl Progress for SubProgress<'_> {
    fn report(&self, fraction: f32, stage: &str) {
        self.parent.report(self.start + self.span * fraction.clamp(0.0, 1.0), stage);
    }
    fn is_cancelled(&self) -> bool {
        self.parent.is_cancelled()
    }
}

/// A share [start, start + span] of the parent's run whose stages carry a label ("page 2 of 5:
/// matching", "error estimate: matching"); an empty label leaves them as they are.
pub struct Labelled<'a> {
    /// The progress this one reports into.
    pub parent: &'a dyn Progress,
    /// Where this part starts in the parent's 0 to 1.
    pub start: f32,
    /// How much of the parent's 0 to 1 this part covers.
    pub span: f32,
    /// Put before each stage name.
    pub label: String,
}

impl Progress for Labelled<'_> {
    fn report(&self, fraction: f32, stage: &str) {
        let f = self.start + self.span * fraction.clamp(0.0, 1.0);
        if self.label.is_empty() {
            self.parent.report(f, stage);
        } else {
            self.parent.report(f, &format!("{}: {stage}", self.label));
        }
    }
    fn is_cancelled(&self) -> bool {
        self.parent.is_cancelled()
    }
}

/// Returns `Err(Cancelled)` when the run was cancelled; call at checkpoints.
pub fn check(p: &dyn Progress) -> crate::Result<()> {
    if p.is_cancelled() {
        Err(crate::Error::Cancelled)
    } else {
        Ok(())
    }
}
