//! Opening input files: only regular files are read, opening never blocks, and no read runs
//! past a stated size.
//!
//! Every file facetcal reads as input goes through [`open_regular`] (or [`read_capped`],
//! [`read_json_text`] on top of it):
//! - the path's metadata (symlinks followed) is checked first, so a FIFO, socket or device is
//!   refused with [`InputError::NotRegular`] before it is ever opened;
//! - the open itself uses `O_NONBLOCK` (on Unix), so a FIFO swapped in after that check cannot
//!   hang the process, and the opened handle's metadata is checked again;
//! - reads stop one byte past the cap: `/dev/zero` or a runaway file costs at most the cap.
//!
//! The caps are constants of this crate: [`MAX_JSON_BYTES`] for every JSON input (target, scene,
//! suite, fleet spec, correspondences, calibration) and [`MAX_PIXELS`], the pixel limit shared by
//! images and by the image size a calibration file declares.
//!
//! ```
//! let dir = tempfile::tempdir().unwrap();
//! let path = dir.path().join("t.json");
//! std::fs::write(&path, "{}").unwrap();
//! assert_eq!(facetcal_inputs::read_json_text(&path).unwrap(), "{}");
//! let e = facetcal_inputs::read_json_text(dir.path()).unwrap_err();
//! assert!(e.to_string().contains("is a folder"), "{e}");
//! ```
//!
//! This crate never parses what it reads and never writes.
#![deny(missing_docs)]

use std::fs::{File, Metadata};
use std::io::Read;
use std::path::{Path, PathBuf};

use thiserror::Error;

/// The largest JSON input read, bytes (128 MiB): far above any real target, scene or
/// calibration file (a calibration of 200 views of 2000 points is about 60 MB), far below
/// what would exhaust a machine.
pub const MAX_JSON_BYTES: u64 = 128 << 20;

/// The largest image file read, bytes (1 GiB); also the cap on any other file of a batch.
pub const MAX_IMAGE_FILE_BYTES: u64 = 1 << 30;

/// The largest image accepted, width x height (100 million pixels); also the largest image
/// size a calibration file may declare.
pub const MAX_PIXELS: u64 = 100_000_000;

/// Why an input file cannot be read.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum InputError {
    /// The file could not be opened or read.
    #[error("{}: cannot read: {source}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// The path is not a regular file (a folder, FIFO, socket or device).
    #[error("{}: is {kind}, not a regular file", path.display())]
    NotRegular {
        /// The file.
        path: PathBuf,
        /// What it is ("a folder", "a FIFO"...).
        kind: &'static str,
    },
    /// The file is larger than the cap.
    #[error("{}: larger than the limit of {limit} bytes for this kind of file", path.display())]
    TooLarge {
        /// The file.
        path: PathBuf,
        /// The cap, bytes.
        limit: u64,
    },
    /// The text starts with a UTF-8 byte-order mark, which JSON forbids (RFC 8259, 8.1).
    #[error("{}: starts with a byte-order mark (EF BB BF); save it as UTF-8 without BOM", path.display())]
    ByteOrderMark {
        /// The file.
        path: PathBuf,
    },
    /// The text is not UTF-8.
    #[error("{}: not UTF-8 text (invalid byte at offset {offset})", path.display())]
    NotUtf8 {
        /// The file.
        path: PathBuf,
        /// Offset of the first invalid byte.
        offset: usize,
    },
}

impl InputError {
    /// The file concerned.
    pub fn path(&self) -> &Path {
        match self {
            InputError::Io { path, .. }
            | InputError::NotRegular { path, .. }
            | InputError::TooLarge { path, .. }
            | InputError::ByteOrderMark { path }
            | InputError::NotUtf8 { path, .. } => path,
        }
    }
}

/// What kind of file a metadata describes, as words for a message; `None` for a regular file.
pub fn special_kind(meta: &Metadata) -> Option<&'static str> {
    let t = meta.file_type();
    if t.is_file() {
        return None;
    }
    if t.is_dir() {
        return Some("a folder");
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if t.is_fifo() {
            return Some("a FIFO");
        }
        if t.is_socket() {
            return Some("a socket");
        }
        if t.is_char_device() {
            return Some("a character device");
        }
        if t.is_block_device() {
            return Some("a block device");
        }
    }
    Some("a special file")
}

/// Whether a path is a regular file (symlinks followed), without opening it.
pub fn check_regular(path: &Path) -> Result<Metadata, InputError> {
    let meta =
        std::fs::metadata(path).map_err(|source| InputError::Io { path: path.into(), source })?;
    match special_kind(&meta) {
        None => Ok(meta),
        Some(kind) => Err(InputError::NotRegular { path: path.into(), kind }),
    }
}

/// Opens a regular file for reading in a way that cannot block, and returns it with its
/// metadata. Anything else is refused with its kind.
pub fn open_regular(path: &Path) -> Result<(File, Metadata), InputError> {
    check_regular(path)?;
    let io = |source| InputError::Io { path: path.into(), source };
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        // Opening a FIFO for reading blocks until a writer comes; O_NONBLOCK makes it return
        // at once, and the fstat below refuses it. On a regular file the flag has no effect
        // on reads (POSIX), so it is left set.
        options.custom_flags(libc::O_NONBLOCK | libc::O_NOCTTY);
    }
    let file = options.open(path).map_err(io)?;
    let meta = file.metadata().map_err(io)?;
    match special_kind(&meta) {
        None => Ok((file, meta)),
        Some(kind) => Err(InputError::NotRegular { path: path.into(), kind }),
    }
}

/// Reads a whole regular file of at most `limit` bytes.
pub fn read_capped(path: &Path, limit: u64) -> Result<Vec<u8>, InputError> {
    let (file, meta) = open_regular(path)?;
    let too_large = || InputError::TooLarge { path: path.into(), limit };
    if meta.len() > limit {
        return Err(too_large());
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    // The length can change under us (a file still being written); the cap holds anyway.
    file.take(limit + 1)
        .read_to_end(&mut bytes)
        .map_err(|source| InputError::Io { path: path.into(), source })?;
    if bytes.len() as u64 > limit {
        return Err(too_large());
    }
    Ok(bytes)
}

/// Checks that bytes are UTF-8 text without a byte-order mark (`path` names them in errors).
pub fn text_from_bytes(path: &Path, bytes: Vec<u8>) -> Result<String, InputError> {
    if bytes.starts_with(&[0xEF, 0xBB, 0xBF]) {
        return Err(InputError::ByteOrderMark { path: path.into() });
    }
    String::from_utf8(bytes).map_err(|e| InputError::NotUtf8 {
        path: path.into(),
        offset: e.utf8_error().valid_up_to(),
    })
}

/// Reads a JSON input: a regular file of at most [`MAX_JSON_BYTES`], UTF-8 without BOM.
pub fn read_json_text(path: &Path) -> Result<String, InputError> {
    text_from_bytes(path, read_capped(path, MAX_JSON_BYTES)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn regular_files_are_read_and_the_cap_holds() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.json");
        std::fs::write(&p, b"0123456789").unwrap();
        assert_eq!(read_capped(&p, 10).unwrap(), b"0123456789");
        let e = read_capped(&p, 9).unwrap_err();
        assert!(matches!(e, InputError::TooLarge { limit: 9, .. }), "{e}");
    }

    #[test]
    fn byte_order_marks_and_bad_utf8_are_named() {
        let p = Path::new("x.json");
        let e = text_from_bytes(p, b"\xEF\xBB\xBF{}".to_vec()).unwrap_err();
        assert!(e.to_string().contains("byte-order mark"), "{e}");
        let e = text_from_bytes(p, b"{\"a\": \"\xFF\"}".to_vec()).unwrap_err();
        assert!(matches!(e, InputError::NotUtf8 { offset: 7, .. }), "{e}");
    }

    #[test]
    fn folders_are_refused_by_kind() {
        let dir = tempfile::tempdir().unwrap();
        let e = read_json_text(dir.path()).unwrap_err();
        assert!(matches!(e, InputError::NotRegular { kind: "a folder", .. }), "{e}");
    }

    #[cfg(unix)]
    #[test]
    fn a_fifo_is_refused_without_blocking() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("f.json");
        let c = std::ffi::CString::new(p.to_str().unwrap()).unwrap();
        // SAFETY: a valid NUL-terminated path; mkfifo only creates a file.
        assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
        let e = read_json_text(&p).unwrap_err();
        assert!(matches!(e, InputError::NotRegular { kind: "a FIFO", .. }), "{e}");
        // Through a symlink as well.
        let l = dir.path().join("link.json");
        std::os::unix::fs::symlink(&p, &l).unwrap();
        assert!(matches!(read_json_text(&l), Err(InputError::NotRegular { kind: "a FIFO", .. })));
    }

    #[cfg(unix)]
    #[test]
    fn devices_are_refused_before_any_read() {
        let e = read_capped(Path::new("/dev/zero"), 1 << 20).unwrap_err();
        assert!(matches!(e, InputError::NotRegular { kind: "a character device", .. }), "{e}");
    }
}
