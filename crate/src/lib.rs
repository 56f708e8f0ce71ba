//! Patchgraph: image denoising with graph signal processing.
//!
//! The core knows nothing of terminals, browsers or file systems: it takes bytes and settings,
//! returns bytes, numbers and typed errors. The CLI (`src/bin/patchgraph`) and the wasm bindings
//! (`wasm.rs`, built only for wasm32) are thin faces over [`pipeline`].

// The house rule made a check: nothing a user controls may panic, so the shipped code holds no
// unwrap or expect (tests may).
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]
// Every public item says what it is: the library is read by the faces and by newcomers.
#![deny(missing_docs)]

pub mod color;
pub mod error;
pub mod error_estimate;
pub mod file;
pub mod graph;
pub mod methods;
pub mod metrics;
pub mod noise;
pub mod patch;
pub mod pipeline;
pub mod planes;
pub mod preview;
pub mod progress;
pub mod removed_detail;
pub mod run_file;
pub mod setting_fields;
pub mod settings;
pub mod simd;
pub mod stack;
pub mod synth;
#[cfg(target_arch = "wasm32")]
pub mod wasm;

pub use error::{Error, Result};
pub use planes::{Image, Plane};
pub use progress::{NoProgress, Progress};
pub use settings::Settings;
