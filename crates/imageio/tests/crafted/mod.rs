//! Crafted image files for the bad-input tests: encoded images, a PNG header that claims another
//! size, a JPEG carrying an EXIF orientation. Shared by the crate's unit tests and the binary's
//! bad-input matrix (both include it by `#[path]`), so it needs only the `image` crate.
#![allow(dead_code)]

use std::io::Cursor;

use image::{DynamicImage, ImageFormat};

/// `img` encoded as `format`.
pub fn encoded(img: &DynamicImage, format: ImageFormat) -> Vec<u8> {
    let mut out = Cursor::new(Vec::new());
    img.write_to(&mut out, format).unwrap();
    out.into_inner()
}

/// An 8-bit grey test pattern, `(x xor y) * 4`, detailed enough that a cut file fails to decode.
pub fn xor_pattern(width: u32, height: u32) -> DynamicImage {
    DynamicImage::ImageLuma8(image::ImageBuffer::from_fn(width, height, |x, y| {
        image::Luma([((x ^ y) * 4) as u8])
    }))
}

/// CRC-32 of PNG chunks (ISO/IEC 15948 annex D, polynomial 0xEDB88320).
pub fn crc32(bytes: &[u8]) -> u32 {
    let mut c = 0xFFFF_FFFFu32;
    for &b in bytes {
        c ^= b as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 { 0xEDB8_8320 ^ (c >> 1) } else { c >> 1 };
        }
    }
    !c
}

/// `png` with its IHDR claiming `width` x `height` pixels and a valid CRC, so that only the size
/// is wrong (a decompression bomb's header).
pub fn png_claiming_size(png: &[u8], width: u32, height: u32) -> Vec<u8> {
    let mut png = png.to_vec();
    // IHDR: length at 8..12, type and data at 12..29 (width 16..20, height 20..24), CRC at 29..33.
    png[16..20].copy_from_slice(&width.to_be_bytes());
    png[20..24].copy_from_slice(&height.to_be_bytes());
    let crc = crc32(&png[12..29]);
    png[29..33].copy_from_slice(&crc.to_be_bytes());
    png
}

/// `jpeg` with an APP1 EXIF segment after its SOI marker whose one IFD entry is the orientation
/// tag (TIFF 6.0 tag 274 = 0x0112, SHORT, count 1; EXIF 2.32 section 4.6.4: 6 = "rotate 90
/// clockwise"), in a little-endian TIFF header.
pub fn jpeg_with_orientation(jpeg: &[u8], orientation: u8) -> Vec<u8> {
    let mut tiff = b"II*\0\x08\0\0\0\x01\0".to_vec();
    tiff.extend_from_slice(&[0x12, 0x01, 3, 0, 1, 0, 0, 0, orientation, 0, 0, 0, 0, 0, 0, 0]);
    let mut app1 = b"Exif\0\0".to_vec();
    app1.extend_from_slice(&tiff);
    let mut bytes = jpeg[..2].to_vec();
    bytes.extend_from_slice(&[0xFF, 0xE1]);
    bytes.extend_from_slice(&((app1.len() + 2) as u16).to_be_bytes());
    bytes.extend_from_slice(&app1);
    bytes.extend_from_slice(&jpeg[2..]);
    bytes
}
