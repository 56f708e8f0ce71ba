//! Typed errors. Each one reads as one plain sentence for the user; `is_user_error` tells the faces
//! whether the user can fix it (bad input or settings: CLI exit code 2) or it is our fault (exit 1).

use std::fmt;
use std::sync::Arc;
use thiserror::Error as ThisError;

/// The core's result: a value or one of our typed errors.
pub type Result<T> = std::result::Result<T, Error>;

/// Everything that can go wrong, each with its one-sentence message for the user.
#[derive(Debug, ThisError, Clone, PartialEq)]
pub enum Error {
    /// The input holds no bytes.
    #[error("the file is empty")]
    EmptyInput,
    /// The bytes are none of the formats we read.
    #[error("the file is not an image in a supported format (TIFF, FITS, PNG, JPEG or BMP)")]
    UnknownFormat,
    /// A supported format, but damaged, truncated or using a feature we do not read; the
    /// decoder's own error, when there is one, is the source.
    #[error("the image could not be decoded: {0}")]
    Decode(String, #[source] Option<Cause>),
    /// The image has no pixels.
    #[error("the image has zero width or height")]
    ZeroSize,
    #[error("the image is {width} x {height} pixels, more than the limit of {limit} megapixels")]
    /// More pixels than the face allows (the page's and the CLI's limits differ).
    TooManyPixels {
        /// Width in pixels.
        width: u32,
        /// Height in pixels.
        height: u32,
        /// The limit, in megapixels.
        limit: u64,
    },
    #[error("decoding the image would need more than the memory limit of {limit_mib} MiB")]
    /// Decoding would allocate more than the decoder's memory limit.
    TooMuchMemory {
        /// The limit, in MiB.
        limit_mib: u64,
    },
    /// A pixel type we do not take (e.g. palette or complex samples), named.
    #[error("{0} images are not supported; save as grey or RGB TIFF (any of 8 to 64 bits) first")]
    UnsupportedPixelType(String),
    /// The output format cannot hold the result (the message says what to choose instead).
    #[error("{0}")]
    UnsupportedOutput(String),
    /// Writing the result failed; the encoder's or the file system's error is the source.
    #[error("the image could not be encoded: {0}")]
    Encode(String, #[source] Option<Cause>),
    #[error("{name} must be between {min} and {max}, got {got}")]
    /// A setting outside its range (`setting_fields::FIELDS`).
    OutOfRange {
        /// The setting's key.
        name: &'static str,
        /// Smallest value accepted.
        min: f64,
        /// Largest value accepted.
        max: f64,
        /// The value given.
        got: f64,
    },
    /// Settings that cannot be read (JSON, unknown fields, versions, combinations).
    #[error("{0}")]
    BadSettings(String),
    /// Two images that should match (reference and result) do not.
    #[error("the two images differ in size or channels: {0}")]
    Mismatch(String),
    /// The image is smaller than the operation needs (e.g. one patch).
    #[error("the image is too small for this operation: {0}")]
    TooSmall(String),
    /// The user stopped the run.
    #[error("the run was cancelled")]
    Cancelled,
    /// Our own fault: a broken invariant, reported instead of a panic.
    #[error("internal error: {0}")]
    Internal(String),
}

impl Error {
    /// A decoding error of our own wording, with no library error behind it.
    pub fn decode(message: impl Into<String>) -> Self {
        Error::Decode(message.into(), None)
    }

    /// A decoding error whose cause is a library's error, kept as its `source()`.
    pub fn decode_caused(message: impl Into<String>, cause: impl std::error::Error + Send + Sync + 'static) -> Self {
        Error::Decode(message.into(), Some(Cause::new(cause)))
    }

    /// An encoding (or writing) error of our own wording.
    pub fn encode(message: impl Into<String>) -> Self {
        Error::Encode(message.into(), None)
    }

    /// An encoding (or writing) error whose cause is a library's error, kept as its `source()`.
    pub fn encode_caused(message: impl Into<String>, cause: impl std::error::Error + Send + Sync + 'static) -> Self {
        Error::Encode(message.into(), Some(Cause::new(cause)))
    }

    /// True when the user can fix the cause (input file, settings); false for our own faults.
    pub fn is_user_error(&self) -> bool {
        !matches!(self, Error::Internal(_) | Error::Cancelled)
    }
}

/// A library's error kept as the cause of one of ours. Shared, because errors are cloned between
/// the faces; two causes are equal when they say the same thing (library errors rarely compare).
#[derive(Clone, Debug)]
pub struct Cause(Arc<dyn std::error::Error + Send + Sync>);

impl Cause {
    /// Keeps `e` as a cause.
    pub fn new(e: impl std::error::Error + Send + Sync + 'static) -> Self {
        Cause(Arc::new(e))
    }
}

impl fmt::Display for Cause {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        self.0.fmt(f)
    }
}

impl std::error::Error for Cause {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        self.0.source()
    }
}

impl PartialEq for Cause {
    fn eq(&self, other: &Self) -> bool {
        self.to_string() == other.to_string()
    }
}
