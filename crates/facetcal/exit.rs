//! Exit codes, in the sysexits style where one fits (documented in README.md).
// The full table is defined once here; not every command uses every code.
#![allow(dead_code)]

use facetcal_inputs::InputError;
use facetcal_model::ModelError;

/// Success.
pub const OK: u8 = 0;
/// Some inputs failed but the command completed (a batch with bad images).
pub const PARTIAL: u8 = 2;
/// Bad command line (EX_USAGE).
pub const USAGE: u8 = 64;
/// Input data unusable: malformed file, no usable image, quality gate failed (EX_DATAERR).
pub const DATA: u8 = 65;
/// An input file or folder does not exist or cannot be read (EX_NOINPUT).
pub const NO_INPUT: u8 = 66;
/// Internal error (EX_SOFTWARE).
pub const SOFTWARE: u8 = 70;
/// Cannot write an output (EX_CANTCREAT).
pub const CANT_CREATE: u8 = 73;
/// A temporary failure: running again may succeed (EX_TEMPFAIL).
pub const TEMP_FAIL: u8 = 75;

/// An error that carries its exit code.
#[derive(Debug)]
pub struct Coded {
    pub code: u8,
    pub message: String,
}

impl std::fmt::Display for Coded {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for Coded {}

/// An error with an explicit exit code.
pub fn coded(code: u8, message: impl Into<String>) -> anyhow::Error {
    anyhow::Error::new(Coded { code, message: message.into() })
}

/// The exit code for an error: an explicit [`Coded`] wins, then the kind of the first typed
/// cause found in the chain.
pub fn code_of(e: &anyhow::Error) -> u8 {
    for cause in e.chain() {
        if let Some(c) = cause.downcast_ref::<Coded>() {
            return c.code;
        }
        if let Some(i) = cause.downcast_ref::<InputError>() {
            return input_code(i);
        }
        if let Some(m) = cause.downcast_ref::<ModelError>() {
            return match m {
                ModelError::Io { source, .. } => io_code(source),
                ModelError::Input(i) => input_code(i),
                _ => DATA,
            };
        }
        if let Some(io) = cause.downcast_ref::<std::io::Error>() {
            return io_code(io);
        }
    }
    SOFTWARE
}

/// A path that is not a regular file cannot be read (66); a file that was read but is too large
/// or not text is bad data (65).
pub fn input_code(e: &InputError) -> u8 {
    match e {
        InputError::Io { source, .. } => io_code(source),
        InputError::NotRegular { .. } => NO_INPUT,
        _ => DATA,
    }
}

fn io_code(e: &std::io::Error) -> u8 {
    match e.kind() {
        std::io::ErrorKind::NotFound | std::io::ErrorKind::PermissionDenied => NO_INPUT,
        std::io::ErrorKind::Interrupted | std::io::ErrorKind::TimedOut => TEMP_FAIL,
        _ => SOFTWARE,
    }
}

/// The cause chain on one line: "context: cause: cause".
pub fn chain(e: &anyhow::Error) -> String {
    e.chain().map(|c| c.to_string()).collect::<Vec<_>>().join(": ")
}
