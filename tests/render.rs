//! `facetcal render`: every example scene under tests/scenes renders to images and a truth
//! file that agree with each other and with the camera model.

use std::path::{Path, PathBuf};

use facetcal_model::{Face, PatternSpec, Target};
use facetcal_render::{FeatureTruth, HiddenReason, Scene, TruthFile};
use nalgebra::{Point2, Vector2};

use crate::util::{facetcal, root, scratch};

fn scenes() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(root().join("tests/scenes"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "json"))
        .collect();
    v.sort();
    v
}

/// The image as 8-bit grey levels (16-bit codes divided by 257).
fn levels(path: &Path) -> (u32, u32, Vec<f64>) {
    let img = image::open(path).unwrap();
    let (w, h) = (img.width(), img.height());
    let data = match img {
        image::DynamicImage::ImageLuma8(i) => i.into_raw().into_iter().map(f64::from).collect(),
        image::DynamicImage::ImageLuma16(i) => {
            i.into_raw().into_iter().map(|v| f64::from(v) / 257.0).collect()
        }
        other => panic!("{}: not a grey image: {:?}", path.display(), other.color()),
    };
    (w, h, data)
}

/// Bilinear sample of a grey image at a pixel position.
fn sample(img: &(u32, u32, Vec<f64>), p: Point2<f64>) -> Option<f64> {
    let (w, h, d) = img;
    let (x0, y0) = (p.x.floor(), p.y.floor());
    if x0 < 0.0 || y0 < 0.0 || x0 + 1.0 >= *w as f64 || y0 + 1.0 >= *h as f64 {
        return None;
    }
    let (tx, ty) = (p.x - x0, p.y - y0);
    let at = |x: f64, y: f64| d[y as usize * *w as usize + x as usize];
    Some(
        at(x0, y0) * (1.0 - tx) * (1.0 - ty)
            + at(x0 + 1.0, y0) * tx * (1.0 - ty)
            + at(x0, y0 + 1.0) * (1.0 - tx) * ty
            + at(x0 + 1.0, y0 + 1.0) * tx * ty,
    )
}

/// Face-frame offsets from a feature to points that must be dark and points that must be
/// light, by pattern: diagonal quadrants of a checker corner (clear of the marks, which sit
/// within 0.2 cell of the cell centres), a dot's centre against the gap between two dots, a
/// square's corner against the outside diagonal.
fn probes(face: &Face, f: &FeatureTruth) -> (Vec<Vector2<f64>>, Vec<Vector2<f64>>) {
    match *face.pattern() {
        PatternSpec::Checkerboard { cell, .. } => {
            let d = 0.3 * cell;
            // Corner (r, c) has cell (r, c) up-left; it is dark when r + c is even.
            let a = [Vector2::new(-d, -d), Vector2::new(d, d)];
            let b = [Vector2::new(d, -d), Vector2::new(-d, d)];
            if (f.id.row + f.id.col) % 2 == 0 { (a.into(), b.into()) } else { (b.into(), a.into()) }
        }
        PatternSpec::DotGrid { pitch, .. } => {
            (vec![Vector2::zeros()], vec![Vector2::new(0.5 * pitch, 0.0)])
        }
        PatternSpec::SquareGrid { side, .. } => {
            let d = 0.25 * side;
            let inward = match f.id.corner {
                0 => Vector2::new(d, d),
                1 => Vector2::new(-d, d),
                2 => Vector2::new(-d, -d),
                _ => Vector2::new(d, -d),
            };
            (vec![inward], vec![-inward])
        }
    }
}

/// Every example scene renders through the command; the truth is consistent with the scene's
/// camera (each truth pixel is the model's projection of the truth point under the truth
/// pose), with the target (each point is the target's feature point) and with the images (at
/// each visible feature the pattern is where the truth says: dark probes darker than light
/// probes by a clear margin).
#[test]
fn every_example_scene_renders_images_and_consistent_truth() {
    let all = scenes();
    assert!(all.len() >= 6, "example scenes: {all:?}");
    let dir = scratch();
    for path in all {
        let name = path.file_stem().unwrap().to_string_lossy().into_owned();
        let out = dir.path().join(&name);
        let run = facetcal(
            dir.path(),
            &["render", path.to_str().unwrap(), "--out", out.to_str().unwrap()],
        );
        assert_eq!(run.code, 0, "{name}: {}", run.stderr);
        let scene = Scene::load(&path).unwrap();
        let truth = TruthFile::from_json(&std::fs::read_to_string(out.join("truth.json")).unwrap())
            .unwrap();
        assert_eq!(truth.camera, *scene.camera(), "{name}");
        assert_eq!(truth.views.len(), scene.view_count(), "{name}");
        let target = Target::new(truth.target.clone()).unwrap();
        let mut checked = 0;
        for (k, view) in truth.views.iter().enumerate() {
            assert_eq!(view.index, k);
            let img = levels(&out.join(&view.image));
            assert_eq!((img.0, img.1), (scene.camera().width, scene.camera().height), "{name}");
            assert!(!view.visible.is_empty(), "{name} view {k} shows no feature");
            for f in &view.visible {
                let exact = target.feature_point(f.id).unwrap();
                assert!((exact - f.point).norm() < 1e-9, "{name}: {} point", f.id);
                let px = scene.camera().project(&view.pose.transform(&f.point)).unwrap();
                assert!((px - f.pixel).norm() < 1e-9, "{name}: {} pixel {} vs {px}", f.id, f.pixel);
                assert!(f.border_px >= 0.0);
                if f.border_px < 6.0 {
                    continue;
                }
                let face = target.face(f.id.face).unwrap();
                let local = face.feature_local(f.id.row, f.id.col, f.id.corner).unwrap();
                let at = |o: &Vector2<f64>| {
                    let q = face.to_target(&Point2::from(local.coords + o));
                    scene.camera().project(&view.pose.transform(&q)).ok()
                };
                let (dark, light) = probes(face, f);
                let pts: Vec<Option<Point2<f64>>> = dark.iter().chain(&light).map(at).collect();
                // Probes under an occluder or off the image say nothing about the pattern.
                let clear = pts.iter().all(|p| {
                    p.is_some_and(|p| {
                        scene.occluders().iter().all(|o| {
                            let b = o.bounds();
                            p.x < b[0] - 4.0
                                || p.x > b[2] + 4.0
                                || p.y < b[1] - 4.0
                                || p.y > b[3] + 4.0
                        })
                    })
                });
                if !clear {
                    continue;
                }
                let vals: Vec<f64> =
                    pts.iter().map(|p| sample(&img, p.unwrap()).unwrap()).collect();
                let (vd, vl) = vals.split_at(dark.len());
                let max_dark = vd.iter().cloned().fold(f64::MIN, f64::max);
                let min_light = vl.iter().cloned().fold(f64::MAX, f64::min);
                assert!(
                    min_light - max_dark > 10.0,
                    "{name} view {k}: {} at {} shows dark {vd:?} light {vl:?}",
                    f.id,
                    f.pixel
                );
                checked += 1;
            }
            // The truth accounts for every feature exactly once.
            assert_eq!(view.visible.len() + view.hidden.len(), target.feature_count(), "{name}");
        }
        assert!(checked > 20, "{name}: only {checked} features checked against the image");
    }
}

/// The fold scene's occluders hide features, and the truth says which.
#[test]
fn occluded_features_are_reported_hidden() {
    let dir = scratch();
    let path = root().join("tests/scenes/fold-occluded.json");
    let run = facetcal(dir.path(), &["render", path.to_str().unwrap(), "--out", "o"]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let truth =
        TruthFile::from_json(&std::fs::read_to_string(dir.path().join("o/truth.json")).unwrap())
            .unwrap();
    let scene = Scene::load(&path).unwrap();
    let mut occluded = 0;
    for v in &truth.views {
        for h in &v.hidden {
            if let HiddenReason::Occluded { occluder } = h.reason {
                assert!(
                    scene.occluders()[occluder].contains([h.pixel.unwrap().x, h.pixel.unwrap().y])
                );
                occluded += 1;
            }
        }
        for f in &v.visible {
            assert!(scene.occluders().iter().all(|o| !o.contains([f.pixel.x, f.pixel.y])));
        }
    }
    assert!(occluded > 0, "the occluders hide nothing");
}

fn bytes_of(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<(String, Vec<u8>)> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| {
            let p = e.unwrap().path();
            (p.file_name().unwrap().to_string_lossy().into_owned(), std::fs::read(&p).unwrap())
        })
        .collect();
    v.sort();
    v
}

/// The same scene gives the same bytes, on one thread or two; another seed gives other bytes.
#[test]
fn the_same_seed_gives_the_same_bytes_whatever_the_thread_count() {
    let dir = scratch();
    let path = root().join("tests/scenes/checkerboard-list.json");
    let p = path.to_str().unwrap();
    let one = std::process::Command::new(env!("CARGO_BIN_EXE_facetcal"))
        .args(["render", p, "--out", "a"])
        .env("RAYON_NUM_THREADS", "1")
        .current_dir(dir.path())
        .status()
        .unwrap();
    assert!(one.success());
    assert_eq!(facetcal(dir.path(), &["render", p, "--out", "b"]).code, 0);
    let a = bytes_of(&dir.path().join("a"));
    let names: Vec<&str> = a.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, ["truth.json", "view-0000.png", "view-0001.png"]);
    assert_eq!(a, bytes_of(&dir.path().join("b")));
    let other = std::fs::read_to_string(&path).unwrap().replace("\"seed\": 11", "\"seed\": 12");
    let moved = dir.path().join("other.json");
    std::fs::write(
        &moved,
        other.replace("../../targets", root().join("targets").to_str().unwrap()),
    )
    .unwrap();
    assert_eq!(facetcal(dir.path(), &["render", "other.json", "--out", "c"]).code, 0);
    let c = bytes_of(&dir.path().join("c"));
    assert_ne!(a[1].1, c[1].1, "another noise seed, other pixels");
    assert_eq!(a[0].1, c[0].1, "same poses, same truth");
}

/// Bad scenes fail with exit code 65 and name the JSON path of the bad field; a missing
/// target file is 66; existing outputs are kept unless --force.
#[test]
fn bad_scenes_name_the_field_and_outputs_are_not_overwritten() {
    let dir = scratch();
    let good = std::fs::read_to_string(root().join("tests/scenes/checkerboard-list.json"))
        .unwrap()
        .replace("../../targets", root().join("targets").to_str().unwrap());
    let cases = [
        (
            good.replace("\"psf_sigma_px\": 0.8", "\"psf_sigma_px\": -1"),
            65,
            "optics.psf_sigma_px: must be in",
        ),
        (
            good.replace("\"noise_sigma\": 2.0", "\"noise_sgma\": 2.0"),
            65,
            "photometry.noise_sgma: unknown field",
        ),
        (
            good.replace("\"version\": 1", "\"version\": 4"),
            65,
            "version: this program reads version 1, got 4",
        ),
        (good.replace("\"fx\": 700.0", "\"fx\": -700.0"), 65, "camera: invalid camera"),
        (
            good.replace("\"translation\": [-140.0, -110.0, 700.0]", "\"translation\": [1, 2]"),
            65,
            "poses.list[0].translation",
        ),
        (good.replace("checkerboard.json", "no-such-target.json"), 66, "no-such-target.json"),
    ];
    for (i, (text, code, message)) in cases.iter().enumerate() {
        let file = dir.path().join(format!("bad-{i}.json"));
        std::fs::write(&file, text).unwrap();
        let run = facetcal(dir.path(), &["render", file.to_str().unwrap(), "--out", "x"]);
        assert_eq!(run.code, *code, "case {i}: {}", run.stderr);
        assert!(run.stderr.contains(message), "case {i}: expected {message:?} in {}", run.stderr);
    }
    std::fs::write(dir.path().join("good.json"), &good).unwrap();
    assert_eq!(facetcal(dir.path(), &["render", "good.json", "--out", "y"]).code, 0);
    let again = facetcal(dir.path(), &["render", "good.json", "--out", "y"]);
    assert_eq!(again.code, 73, "{}", again.stderr);
    assert!(again.stderr.contains("--force"));
    assert_eq!(facetcal(dir.path(), &["render", "good.json", "--out", "y", "--force"]).code, 0);
}
