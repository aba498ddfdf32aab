//! Reading image files safely: decoding limits against decompression bombs, the decoder's blind
//! spots closed, full bit depth kept, and the file's hash for the record.
//!
//! [`load`] refuses, each with its own [`ImageIoError`] variant naming the file:
//! - empty files, files that are not images, and formats facetcal does not read;
//! - files whose content does not match their name (a PNG called `.jpg`): a mislabelled file is
//!   a sign of a mixed-up batch, so it is reported rather than guessed around;
//! - truncated files, including the case the decoder lets through: a JPEG cut short decodes
//!   without error, its missing part filled in grey, so the end-of-image marker is required
//!   (and a PNG's `IEND` chunk, a GIF's trailer);
//! - images larger than the [`DecodeLimits`] (pixels, decoder allocation, file size);
//! - images with an EXIF orientation other than "as stored": intrinsics live in sensor
//!   coordinates and the decoder does not apply the tag, so a rotated image is never used
//!   silently ([`OrientationPolicy`]).
//!
//! 16-bit images stay 16-bit; colour stays colour (the detector converts to grey).
//! This crate never writes files and knows nothing of targets or cameras.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

use std::io::Cursor;
use std::path::{Path, PathBuf};

use image::{DynamicImage, ImageDecoder, ImageFormat, ImageReader, metadata::Orientation};
use sha2::{Digest, Sha256};
use thiserror::Error;

/// File name extensions facetcal reads, lower case.
pub const EXTENSIONS: [&str; 7] = ["png", "jpg", "jpeg", "tif", "tiff", "bmp", "gif"];

/// Limits that bound what one file can make the program allocate.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DecodeLimits {
    /// Largest width x height accepted. Default 100 million pixels.
    pub max_pixels: u64,
    /// Largest allocation the decoder may make, bytes. Default 2 GiB.
    pub max_alloc_bytes: u64,
    /// Largest file read, bytes. Default 1 GiB.
    pub max_file_bytes: u64,
}

impl Default for DecodeLimits {
    fn default() -> Self {
        DecodeLimits {
            max_pixels: facetcal_inputs::MAX_PIXELS,
            max_alloc_bytes: 2 << 30,
            max_file_bytes: facetcal_inputs::MAX_IMAGE_FILE_BYTES,
        }
    }
}

/// What to do with an image whose EXIF orientation asks for a rotation or a flip.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum OrientationPolicy {
    /// Refuse the image (default).
    #[default]
    Reject,
    /// Use the pixels as stored (sensor orientation) and record the tag.
    KeepStored,
}

/// Options of [`load`].
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct LoadOptions {
    /// Decoding limits.
    pub limits: DecodeLimits,
    /// EXIF orientation handling.
    pub orientation: OrientationPolicy,
}

/// A decoded image and what is known of its file.
#[derive(Clone, Debug)]
pub struct LoadedImage {
    /// The pixels, at the file's bit depth.
    pub image: DynamicImage,
    /// The file's format.
    pub format: ImageFormat,
    /// Bits per channel (8 or 16, 32 for floating point).
    pub bits: u8,
    /// SHA-256 of the file's bytes, lower-case hex.
    pub sha256: String,
    /// The EXIF orientation tag when it asks for a transformation (only with
    /// [`OrientationPolicy::KeepStored`]).
    pub orientation: Option<String>,
}

/// Why a file could not be used.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum ImageIoError {
    /// The path is not a regular file (a folder, FIFO, socket or device), refused without
    /// blocking.
    #[error("{}: is {kind}, not a regular file", path.display())]
    NotRegular {
        /// The file.
        path: PathBuf,
        /// What it is ("a FIFO"...).
        kind: &'static str,
    },
    /// The file could not be read.
    #[error("{}: cannot read: {source}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// The file is empty.
    #[error("{}: the file is empty", path.display())]
    Empty {
        /// The file.
        path: PathBuf,
    },
    /// The content is not a known image format.
    #[error("{}: not an image (the content matches no known image format)", path.display())]
    NotAnImage {
        /// The file.
        path: PathBuf,
    },
    /// An image format facetcal does not read.
    #[error("{}: {format} images are not supported (use PNG, JPEG, TIFF, BMP or GIF)", path.display())]
    Unsupported {
        /// The file.
        path: PathBuf,
        /// The detected format.
        format: String,
    },
    /// The name says one format, the content another.
    #[error("{}: the file is named .{named} but holds a {actual} image", path.display())]
    NameMismatch {
        /// The file.
        path: PathBuf,
        /// The extension.
        named: String,
        /// The detected format.
        actual: String,
    },
    /// The file ends before the image does.
    #[error("{}: truncated ({detail})", path.display())]
    Truncated {
        /// The file.
        path: PathBuf,
        /// What is missing.
        detail: String,
    },
    /// The image exceeds a decoding limit.
    #[error("{}: too large ({detail})", path.display())]
    TooLarge {
        /// The file.
        path: PathBuf,
        /// Which limit.
        detail: String,
    },
    /// EXIF orientation asks for a rotation or flip.
    #[error(
        "{}: EXIF orientation asks for {orientation}; facetcal calibrates in sensor coordinates and never rotates silently (re-export the image without rotation, or allow stored orientation)",
        path.display()
    )]
    Rotated {
        /// The file.
        path: PathBuf,
        /// The tag's meaning.
        orientation: String,
    },
    /// The decoder failed.
    #[error("{}: cannot decode: {message}", path.display())]
    Decode {
        /// The file.
        path: PathBuf,
        /// The decoder's message.
        message: String,
    },
}

/// Whether a path's extension is one facetcal reads (dotfiles never are).
pub fn is_image_name(path: &Path) -> bool {
    let hidden = path.file_name().and_then(|n| n.to_str()).is_some_and(|n| n.starts_with('.'));
    !hidden && extension(path).is_some_and(|e| EXTENSIONS.contains(&e.as_str()))
}

fn extension(path: &Path) -> Option<String> {
    path.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase())
}

fn format_name(f: ImageFormat) -> String {
    format!("{f:?}").to_uppercase()
}

fn extension_matches(ext: &str, f: ImageFormat) -> bool {
    matches!(
        (ext, f),
        ("png", ImageFormat::Png)
            | ("jpg" | "jpeg", ImageFormat::Jpeg)
            | ("tif" | "tiff", ImageFormat::Tiff)
            | ("bmp", ImageFormat::Bmp)
            | ("gif", ImageFormat::Gif)
    )
}

/// SHA-256 of bytes, lower-case hex.
pub fn sha256_hex(bytes: &[u8]) -> String {
    let d = Sha256::digest(bytes);
    d.iter().map(|b| format!("{b:02x}")).collect()
}

/// SHA-256 of a regular file's bytes (at most [`DecodeLimits::max_file_bytes`] by default),
/// lower-case hex.
pub fn sha256_file(path: &Path) -> Result<String, ImageIoError> {
    Ok(sha256_hex(&read_file(path, DecodeLimits::default().max_file_bytes)?))
}

/// Reads a regular file of at most `limit` bytes; opening never blocks.
fn read_file(path: &Path, limit: u64) -> Result<Vec<u8>, ImageIoError> {
    use facetcal_inputs::InputError;
    facetcal_inputs::read_capped(path, limit).map_err(|e| match e {
        InputError::NotRegular { path, kind } => ImageIoError::NotRegular { path, kind },
        InputError::TooLarge { path, limit } => {
            ImageIoError::TooLarge { path, detail: format!("file larger than {limit} bytes") }
        }
        InputError::Io { path, source } => ImageIoError::Io { path, source },
        other => ImageIoError::Io { path: path.into(), source: std::io::Error::other(other) },
    })
}

/// Checks the end of the stream for formats whose decoders accept a file cut short.
fn check_complete(path: &Path, format: ImageFormat, bytes: &[u8]) -> Result<(), ImageIoError> {
    let complete = match format {
        // Trailing padding after the end-of-image marker is legal; the marker is not optional.
        ImageFormat::Jpeg => {
            let end = bytes.iter().rposition(|&b| b != 0).map_or(0, |i| i + 1);
            end >= 4 && bytes[end - 2..end] == [0xFF, 0xD9]
        }
        // IEND chunk: length 0, type "IEND", CRC AE 42 60 82.
        ImageFormat::Png => bytes.windows(8).rev().take(64).any(|w| w == b"IEND\xAE\x42\x60\x82"),
        ImageFormat::Gif => bytes.last() == Some(&0x3B),
        _ => true,
    };
    if complete {
        return Ok(());
    }
    let detail = match format {
        ImageFormat::Jpeg => "the JPEG end-of-image marker is missing",
        ImageFormat::Png => "the PNG IEND chunk is missing",
        _ => "the GIF trailer is missing",
    };
    Err(ImageIoError::Truncated { path: path.into(), detail: detail.into() })
}

fn orientation_name(o: Orientation) -> &'static str {
    match o {
        Orientation::NoTransforms => "no transformation",
        Orientation::Rotate90 => "a rotation by 90 degrees",
        Orientation::Rotate180 => "a rotation by 180 degrees",
        Orientation::Rotate270 => "a rotation by 270 degrees",
        Orientation::FlipHorizontal => "a horizontal flip",
        Orientation::FlipVertical => "a vertical flip",
        Orientation::Rotate90FlipH => "a rotation by 90 degrees and a flip",
        Orientation::Rotate270FlipH => "a rotation by 270 degrees and a flip",
    }
}

/// Reads and decodes one image file with every check of this crate.
pub fn load(path: &Path, options: &LoadOptions) -> Result<LoadedImage, ImageIoError> {
    decode(path, read_file(path, options.limits.max_file_bytes)?, options)
}

/// Decodes a file's bytes already in memory (`path` names it in errors).
pub fn decode(
    path: &Path,
    bytes: Vec<u8>,
    options: &LoadOptions,
) -> Result<LoadedImage, ImageIoError> {
    if bytes.is_empty() {
        return Err(ImageIoError::Empty { path: path.into() });
    }
    let format =
        image::guess_format(&bytes).map_err(|_| ImageIoError::NotAnImage { path: path.into() })?;
    if !matches!(
        format,
        ImageFormat::Png
            | ImageFormat::Jpeg
            | ImageFormat::Tiff
            | ImageFormat::Bmp
            | ImageFormat::Gif
    ) {
        return Err(ImageIoError::Unsupported { path: path.into(), format: format_name(format) });
    }
    if let Some(ext) = extension(path)
        && !extension_matches(&ext, format)
    {
        return Err(ImageIoError::NameMismatch {
            path: path.into(),
            named: ext,
            actual: format_name(format),
        });
    }
    check_complete(path, format, &bytes)?;
    let sha256 = sha256_hex(&bytes);
    let decode_err = |e: image::ImageError| match e {
        image::ImageError::Limits(l) => {
            ImageIoError::TooLarge { path: path.into(), detail: l.to_string() }
        }
        other => ImageIoError::Decode { path: path.into(), message: other.to_string() },
    };
    let mut reader = ImageReader::with_format(Cursor::new(&bytes[..]), format);
    let mut limits = image::Limits::default();
    limits.max_alloc = Some(options.limits.max_alloc_bytes);
    reader.limits(limits);
    let mut decoder = reader.into_decoder().map_err(decode_err)?;
    let (w, h) = decoder.dimensions();
    if w as u64 * h as u64 > options.limits.max_pixels || w == 0 || h == 0 {
        return Err(ImageIoError::TooLarge {
            path: path.into(),
            detail: format!("{w} x {h} pixels, limit {} pixels", options.limits.max_pixels),
        });
    }
    let orientation = decoder.orientation().unwrap_or(Orientation::NoTransforms);
    let orientation = match (orientation, options.orientation) {
        (Orientation::NoTransforms, _) => None,
        (o, OrientationPolicy::Reject) => {
            return Err(ImageIoError::Rotated {
                path: path.into(),
                orientation: orientation_name(o).into(),
            });
        }
        (o, OrientationPolicy::KeepStored) => Some(orientation_name(o).to_string()),
    };
    let image = DynamicImage::from_decoder(decoder).map_err(decode_err)?;
    let bits = match image.color() {
        c if c.bytes_per_pixel() / c.channel_count() >= 4 => 32,
        c if c.bytes_per_pixel() / c.channel_count() == 2 => 16,
        _ => 8,
    };
    Ok(LoadedImage { image, format, bits, sha256, orientation })
}

#[cfg(test)]
#[path = "../tests/crafted/mod.rs"]
mod crafted;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::crafted::{encoded, jpeg_with_orientation, png_claiming_size, xor_pattern};

    fn gradient16() -> DynamicImage {
        let img =
            image::ImageBuffer::from_fn(40, 30, |x, y| image::Luma([(x * 1000 + y * 7) as u16]));
        DynamicImage::ImageLuma16(img)
    }

    #[test]
    fn sixteen_bit_png_stays_sixteen_bit() {
        let bytes = encoded(&gradient16(), ImageFormat::Png);
        let got = decode(Path::new("a.png"), bytes, &LoadOptions::default()).unwrap();
        assert_eq!(got.bits, 16);
        assert_eq!(got.image.as_luma16().unwrap().get_pixel(39, 29)[0], 39 * 1000 + 29 * 7);
    }

    /// SHA-256 of "abc": FIPS 180-2, Appendix B.1.
    #[test]
    fn sha256_matches_the_standard_vector() {
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn every_bad_file_class_gets_its_own_error() {
        let o = LoadOptions::default();
        let img = xor_pattern(64, 48);
        let jpeg = encoded(&img, ImageFormat::Jpeg);
        let png = encoded(&img, ImageFormat::Png);
        assert!(decode(Path::new("a.jpg"), jpeg.clone(), &o).is_ok());
        let cut = jpeg[..jpeg.len() * 2 / 3].to_vec();
        assert!(matches!(decode(Path::new("a.jpg"), cut, &o), Err(ImageIoError::Truncated { .. })));
        let cut = png[..png.len() - 10].to_vec();
        assert!(matches!(decode(Path::new("a.png"), cut, &o), Err(ImageIoError::Truncated { .. })));
        assert!(matches!(decode(Path::new("a.png"), vec![], &o), Err(ImageIoError::Empty { .. })));
        assert!(matches!(
            decode(Path::new("a.png"), b"hello, not an image".to_vec(), &o),
            Err(ImageIoError::NotAnImage { .. })
        ));
        assert!(matches!(
            decode(Path::new("a.jpg"), png.clone(), &o),
            Err(ImageIoError::NameMismatch { .. })
        ));
        let small = LoadOptions {
            limits: DecodeLimits { max_pixels: 1000, ..DecodeLimits::default() },
            ..o
        };
        assert!(matches!(
            decode(Path::new("a.png"), png, &small),
            Err(ImageIoError::TooLarge { .. })
        ));
    }

    /// A valid PNG header claiming 100000 x 100000 pixels is refused as too large before any
    /// pixel is allocated.
    #[test]
    fn decompression_bombs_are_refused() {
        let png = png_claiming_size(&encoded(&gradient16(), ImageFormat::Png), 100_000, 100_000);
        let e = decode(Path::new("bomb.png"), png, &LoadOptions::default()).unwrap_err();
        assert!(matches!(e, ImageIoError::TooLarge { .. }), "{e}");
        assert!(e.to_string().contains("100000 x 100000"), "{e}");
    }

    /// A JPEG whose EXIF orientation tag (TIFF 6.0 tag 274, value 6 = "rotate 90 clockwise",
    /// EXIF 2.32 section 4.6.4) asks for a rotation is refused, or kept as stored on request.
    #[test]
    fn rotated_images_are_never_used_silently() {
        let img = DynamicImage::ImageLuma8(image::ImageBuffer::from_fn(32, 16, |x, _| {
            image::Luma([(x * 8) as u8])
        }));
        let jpeg = encoded(&img, ImageFormat::Jpeg);
        let bytes = jpeg_with_orientation(&jpeg, 6);
        let e = decode(Path::new("r.jpg"), bytes.clone(), &LoadOptions::default()).unwrap_err();
        assert!(matches!(e, ImageIoError::Rotated { .. }), "{e}");
        let keep =
            LoadOptions { orientation: OrientationPolicy::KeepStored, ..LoadOptions::default() };
        let got = decode(Path::new("r.jpg"), bytes, &keep).unwrap();
        assert_eq!((got.image.width(), got.image.height()), (32, 16));
        assert_eq!(got.orientation.as_deref(), Some("a rotation by 90 degrees"));
    }

    #[test]
    fn image_names() {
        assert!(is_image_name(Path::new("x/a.PNG")));
        assert!(is_image_name(Path::new("b.tiff")));
        assert!(!is_image_name(Path::new(".a.png")));
        assert!(!is_image_name(Path::new("a.png.part")));
        assert!(!is_image_name(Path::new("notes.txt")));
    }
}
