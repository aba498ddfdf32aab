//! The bad-input matrix: every class of bad image file, given to the binary beside one good
//! image, gets its own message naming the file, and the batch goes on (exit 2); given alone it
//! ends the run with exit 65. Each class is listed in DEVELOPERS.md ("Bad input").

use std::io::Cursor;
use std::path::Path;

use image::{DynamicImage, ImageFormat};

use crate::util::{bundled_target, facetcal, scratch};

fn encoded(img: &DynamicImage, format: ImageFormat) -> Vec<u8> {
    let mut out = Cursor::new(Vec::new());
    img.write_to(&mut out, format).unwrap();
    out.into_inner()
}

/// CRC-32 of PNG chunks (ISO/IEC 15948 annex D, polynomial 0xEDB88320).
fn crc32(bytes: &[u8]) -> u32 {
    let mut c = 0xFFFF_FFFFu32;
    for &b in bytes {
        c ^= b as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 { 0xEDB8_8320 ^ (c >> 1) } else { c >> 1 };
        }
    }
    !c
}

/// A JPEG carrying EXIF orientation 6 (TIFF 6.0 tag 274, "rotate 90 clockwise").
fn rotated_jpeg(jpeg: &[u8]) -> Vec<u8> {
    let mut tiff = b"II*\0\x08\0\0\0\x01\0".to_vec();
    tiff.extend_from_slice(&[0x12, 0x01, 3, 0, 1, 0, 0, 0, 6, 0, 0, 0, 0, 0, 0, 0]);
    let mut app1 = b"Exif\0\0".to_vec();
    app1.extend_from_slice(&tiff);
    let mut bytes = jpeg[..2].to_vec();
    bytes.extend_from_slice(&[0xFF, 0xE1]);
    bytes.extend_from_slice(&((app1.len() + 2) as u16).to_be_bytes());
    bytes.extend_from_slice(&app1);
    bytes.extend_from_slice(&jpeg[2..]);
    bytes
}

/// (file name, bytes, what the message must say)
fn bad_files() -> Vec<(&'static str, Vec<u8>, &'static str)> {
    let img = DynamicImage::ImageLuma8(image::ImageBuffer::from_fn(64, 48, |x, y| {
        image::Luma([((x ^ y) * 4) as u8])
    }));
    let jpeg = encoded(&img, ImageFormat::Jpeg);
    let png = encoded(&img, ImageFormat::Png);
    let mut bomb = png.clone();
    bomb[16..20].copy_from_slice(&100_000u32.to_be_bytes());
    bomb[20..24].copy_from_slice(&100_000u32.to_be_bytes());
    let crc = crc32(&bomb[12..29]);
    bomb[29..33].copy_from_slice(&crc.to_be_bytes());
    vec![
        ("empty.png", vec![], "the file is empty"),
        ("cut.jpg", jpeg[..jpeg.len() * 2 / 3].to_vec(), "end-of-image marker is missing"),
        ("cut.png", png[..png.len() - 10].to_vec(), "IEND chunk is missing"),
        ("text.png", b"hello, not an image".to_vec(), "not an image"),
        ("named-wrong.jpg", png.clone(), "is named .jpg but holds a PNG image"),
        ("bomb.png", bomb, "too large"),
        ("rotated.jpg", rotated_jpeg(&jpeg), "rotation by 90 degrees"),
        (
            "garbage.tif",
            vec![0x49, 0x49, 0x2a, 0, 0xff, 0xff, 0xff, 0x7f, 1, 2, 3],
            "cannot decode",
        ),
    ]
}

fn detect(dir: &Path, files: &[&str]) -> crate::util::Run {
    let target = bundled_target("corner");
    let mut args = vec!["detect", "--target", target.to_str().unwrap(), "--out", "out"];
    args.extend_from_slice(files);
    facetcal(dir, &args)
}

#[test]
fn every_class_of_bad_image_is_reported_and_the_batch_goes_on() {
    let root = scratch();
    let dir = root.path();
    let good = DynamicImage::ImageLuma16(image::ImageBuffer::from_fn(80, 60, |x, y| {
        image::Luma([(x * 700 + y * 11) as u16])
    }));
    std::fs::write(dir.join("good.png"), encoded(&good, ImageFormat::Png)).unwrap();
    let cases = bad_files();
    for (name, bytes, _) in &cases {
        std::fs::write(dir.join(name), bytes).unwrap();
    }
    let mut names: Vec<&str> = cases.iter().map(|c| c.0).collect();
    names.push("good.png");
    names.push("missing.png");
    let run = detect(dir, &names);
    assert_eq!(run.code, 2, "{}\n{}", run.stdout, run.stderr);
    assert!(run.stdout.contains("good.png"), "the good image is processed: {}", run.stdout);
    for (name, _, says) in &cases {
        let line = run.stderr.lines().find(|l| l.contains(name)).unwrap_or("");
        assert!(line.contains(says), "{name}: expected '{says}' in '{line}'");
    }
    let missing = run.stderr.lines().find(|l| l.contains("missing.png")).unwrap_or("");
    assert!(missing.contains("cannot read"), "{missing}");
    assert!(dir.join("out/good.detections.json").is_file());

    // Alone, a bad file ends the run with exit 65 and its message.
    for (name, _, says) in &cases {
        let run = detect(dir, &[name]);
        assert_eq!(run.code, 65, "{name}: {}", run.stderr);
        assert!(run.stderr.contains(says), "{name}: {}", run.stderr);
    }
}
