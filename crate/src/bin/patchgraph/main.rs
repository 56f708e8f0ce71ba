//! The command-line face of Patchgraph: parses arguments, reads and writes files, shows progress.
//! All computation happens in the library; errors become one line on stderr and an exit code
//! (2: bad input or settings, 1: internal failure, 130: cancelled).

// The house rule made a check: nothing a user controls may panic, so the shipped code holds no
// unwrap or expect (tests may).
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

mod batch;
mod commands;
mod sweep;
mod terminal;

use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(name = "patchgraph", version, about = "Denoise images with graph signal processing")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Denoise one image; the output keeps the input's bit depth and channels.
    Denoise(commands::DenoiseArgs),
    /// Fit the noise of an image: level per channel, how it grows with brightness, its spectrum.
    Noise {
        /// The image file.
        input: PathBuf,
        /// Which image of a stack or cube to fit (1 = the first); `inspect` lists them.
        #[arg(long, default_value_t = 1)]
        image: usize,
        /// Any part of the model known beforehand (e.g. the camera's offset from a dark frame):
        /// the rest is fitted around it.
        #[command(flatten)]
        model: commands::ModelArgs,
        /// Print one JSON object on stdout instead of a text summary.
        #[arg(long)]
        json: bool,
    },
    /// Denoise many files with one setting; results keep their names in OUTDIR.
    Batch {
        /// Image files and/or folders of images.
        #[arg(required = true)]
        inputs: Vec<PathBuf>,
        /// The folder the results go to (created if missing); inputs are never replaced.
        #[arg(short, long)]
        output: PathBuf,
        /// Settings JSON for every file; the defaults of `denoise` when not given.
        #[arg(long)]
        settings: Option<PathBuf>,
        /// Only this share of the sorted file list: K/N takes files K, K+N, K+2N, ...
        #[arg(long)]
        shard: Option<String>,
        /// Print one JSON object on stdout instead of a text summary.
        #[arg(long)]
        json: bool,
    },
    /// What a file holds: format, sample type, pages, channels, metadata, and how it was made.
    Inspect {
        /// Any file Patchgraph reads.
        input: PathBuf,
        /// Print one JSON object on stdout instead of a text summary.
        #[arg(long)]
        json: bool,
    },
    /// One parameter over several values, each result's error estimated without a clean image;
    /// writes a CSV (one row per value) and names the value of lowest estimated error when every value has one.
    Sweep(sweep::SweepArgs),
    /// PSNR and SSIM of TEST against the clean image CLEAN, per channel and overall.
    Metrics {
        /// The clean reference.
        clean: PathBuf,
        /// The image to score (a result, or the noisy input for comparison).
        test: PathBuf,
        /// Print one JSON object on stdout instead of a text summary.
        #[arg(long)]
        json: bool,
    },
}

/// Clap's multi-line usage errors folded into the one line our contract promises.
fn one_line(e: &clap::Error) -> String {
    let text = e.to_string();
    let parts: Vec<&str> = text
        .lines()
        .map(str::trim)
        .filter(|l| !l.is_empty() && !l.starts_with("For more information") && !l.starts_with("Usage:"))
        .collect();
    parts.join(" ")
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            use clap::error::ErrorKind;
            if matches!(e.kind(), ErrorKind::DisplayHelp | ErrorKind::DisplayVersion) {
                let _ = e.print();
                return ExitCode::SUCCESS;
            }
            eprintln!("{}", one_line(&e));
            return ExitCode::from(2);
        }
    };
    let result = match cli.command {
        Command::Denoise(args) => commands::denoise(args),
        Command::Noise { input, image, model, json } => commands::noise(&input, image, &model, json),
        Command::Batch { inputs, output, settings, shard, json } => {
            batch::batch(&inputs, &output, settings.as_deref(), shard.as_deref(), json)
        }
        Command::Metrics { clean, test, json } => commands::metrics(&clean, &test, json),
        Command::Inspect { input, json } => commands::inspect(&input, json),
        Command::Sweep(args) => sweep::sweep(args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            eprintln!("error: {}", failure.message);
            ExitCode::from(failure.code)
        }
    }
}
