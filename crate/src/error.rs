//! Typed errors. Each one reads as one plain sentence for the user; `is_user_error` tells the faces
//! whether the user can fix it (bad input or settings: CLI exit code 2) or it is our fault (exit 1).

use thiserror::Error as ThisError;

pub type Result<T> = std::result::Result<T, Error>;

#[derive(Debug, ThisError, Clone, PartialEq)]
pub enum Error {
    #[error("the file is empty")]
    EmptyInput,
    #[error("the file is not an image in a supported format (TIFF, FITS, PNG, JPEG or BMP)")]
    UnknownFormat,
    #[error("the image could not be decoded: {0}")]
    Decode(String),
    #[error("the image has zero width or height")]
    ZeroSize,
    #[error("the image is {width} x {height} pixels, more than the limit of {limit} megapixels")]
    TooManyPixels { width: u32, height: u32, limit: u64 },
    #[error("decoding the image would need more than the memory limit of {limit_mib} MiB")]
    TooMuchMemory { limit_mib: u64 },
    #[error("{0} images are not supported; save as grey or RGB TIFF (any of 8 to 64 bits) first")]
    UnsupportedPixelType(String),
    #[error("{0}")]
    UnsupportedOutput(String),
    #[error("the image could not be encoded: {0}")]
    Encode(String),
    #[error("{name} must be between {min} and {max}, got {got}")]
    OutOfRange { name: &'static str, min: f64, max: f64, got: f64 },
    #[error("{0}")]
    BadSettings(String),
    #[error("the two images differ in size or channels: {0}")]
    Mismatch(String),
    #[error("the image is too small for this operation: {0}")]
    TooSmall(String),
    #[error("the run was cancelled")]
    Cancelled,
    #[error("internal error: {0}")]
    Internal(String),
}

impl Error {
    /// True when the user can fix the cause (input file, settings); false for our own faults.
    pub fn is_user_error(&self) -> bool {
        !matches!(self, Error::Internal(_) | Error::Cancelled)
    }
}
