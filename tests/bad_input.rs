//! The bad-input matrix: every class of bad image file, given to the binary beside one good
//! image, gets its own message naming the file, and the batch goes on (exit 2); given alone it
//! ends the run with exit 65. Each class is listed in DEVELOPERS.md ("Bad input").

use std::path::Path;

use image::{DynamicImage, ImageFormat};

use crate::crafted::{encoded, jpeg_with_orientation, png_claiming_size, xor_pattern};
use crate::util::{bundled_target, facetcal, scratch};

/// (file name, bytes, what the message must say)
fn bad_files() -> Vec<(&'static str, Vec<u8>, &'static str)> {
    let img = xor_pattern(64, 48);
    let jpeg = encoded(&img, ImageFormat::Jpeg);
    let png = encoded(&img, ImageFormat::Png);
    let bomb = png_claiming_size(&png, 100_000, 100_000);
    vec![
        ("empty.png", vec![], "the file is empty"),
        ("cut.jpg", jpeg[..jpeg.len() * 2 / 3].to_vec(), "end-of-image marker is missing"),
        ("cut.png", png[..png.len() - 10].to_vec(), "IEND chunk is missing"),
        ("text.png", b"hello, not an image".to_vec(), "not an image"),
        ("named-wrong.jpg", png.clone(), "is named .jpg but holds a PNG image"),
        ("bomb.png", bomb, "too large"),
        ("rotated.jpg", jpeg_with_orientation(&jpeg, 6), "rotation by 90 degrees"),
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
