//! Detector speed and working memory (criterion; run with `cargo bench --bench detect`).
//!
//! - `checker/<w>x<h>`: `detect` on a rendered checkerboard view, checker kind only (corners
//!   and face-code marks), one thread (the detector uses none of its own);
//!   `checker/corners_only_1920x1080` the corner stage alone. 1920 x 1080 is the figure of the contributor
//!   guide; 960 x 540 and a 2 x 2 tiling at 3840 x 2160 show the cost against the pixel count.
//! - `blur/*`: the detector's separable `f32` Gaussian against
//!   `imageproc::filter::gaussian_blur_f32`, the reason the detector has its own.
//! - Working memory: a counting allocator records the peak of live heap bytes during one
//!   `detect` call beyond what was live before it; printed per pixel before the benchmarks.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

use criterion::{Criterion, criterion_group, criterion_main};
use facetcal_detector::{DetectorOptions, GreyImage, detect, filter};
use facetcal_model::{Camera, PatternKind, Pose, Target};
use facetcal_render::{GreyImage as RenderImage, Scene, render_view};
use nalgebra::Vector3;

struct Counting;

static LIVE: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

// SAFETY: forwards to the system allocator; only counts.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        let p = unsafe { System.alloc(layout) };
        if !p.is_null() {
            let now = LIVE.fetch_add(layout.size(), Ordering::Relaxed) + layout.size();
            PEAK.fetch_max(now, Ordering::Relaxed);
        }
        p
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) };
        LIVE.fetch_sub(layout.size(), Ordering::Relaxed);
    }
}

#[global_allocator]
static ALLOC: Counting = Counting;

fn checker_image(width: u32, height: u32) -> GreyImage {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let path = ["targets/checkerboard.json", "../../targets/checkerboard.json"]
        .iter()
        .map(|p| root.join(p))
        .find(|p| p.exists())
        .expect("bundled checkerboard target");
    let target = Target::load(&path).expect("bundled target loads");
    // The 280 x 220 mm face filling most of the height, slightly turned.
    let f = height as f64 * 1.1;
    let cam = Camera::pinhole(
        width,
        height,
        f,
        f,
        (width as f64 - 1.0) / 2.0,
        (height as f64 - 1.0) / 2.0,
    );
    let pose =
        Pose::from_axis_angle(Vector3::new(0.2, -0.25, 0.1), Vector3::new(-140.0, -110.0, 300.0));
    let scene = Scene::builder(target, cam)
        .pose(pose)
        .psf_sigma_px(1.0)
        .noise_sigma(2.0)
        .seed(3)
        .build()
        .expect("scene builds");
    match render_view(&scene, 0).expect("view renders").image {
        RenderImage::Eight(g) => GreyImage::from_luma8(&g),
        RenderImage::Sixteen(g) => GreyImage::from_luma16(&g),
    }
}

fn tile2(img: &GreyImage) -> GreyImage {
    let (w, h) = (img.width(), img.height());
    let mut data = Vec::with_capacity(4 * w * h);
    for y in 0..2 * h {
        let row = &img.data()[(y % h) * w..(y % h + 1) * w];
        data.extend_from_slice(row);
        data.extend_from_slice(row);
    }
    GreyImage::from_vec(2 * w, 2 * h, data).expect("sizes match")
}

fn bench(c: &mut Criterion) {
    let opts = DetectorOptions::for_kind(PatternKind::Checkerboard);
    let hd = checker_image(1920, 1080);
    let small = checker_image(960, 540);
    let uhd = tile2(&hd);
    for img in [&small, &hd, &uhd] {
        let before = LIVE.load(Ordering::Relaxed);
        PEAK.store(before, Ordering::Relaxed);
        let n = detect(img, &opts).expect("detects").checker_corners.len();
        let peak = PEAK.load(Ordering::Relaxed) - before;
        let px = img.width() * img.height();
        println!(
            "working memory {}x{}: {} corners, peak {} bytes = {:.1} bytes/pixel (input image not counted: {} bytes/pixel)",
            img.width(),
            img.height(),
            n,
            peak,
            peak as f64 / px as f64,
            std::mem::size_of::<f32>()
        );
    }
    let mut g = c.benchmark_group("checker");
    g.sample_size(20);
    for img in [&small, &hd, &uhd] {
        g.bench_function(format!("{}x{}", img.width(), img.height()), |b| {
            b.iter(|| detect(img, &opts).expect("detects"))
        });
    }
    // The corner stage alone (no blobs, so no face-code marks).
    g.bench_function("corners_only_1920x1080", |b| {
        b.iter(|| facetcal_detector::checker::detect_checker_corners(&hd, &opts))
    });
    g.finish();

    let mut g = c.benchmark_group("blur");
    g.sample_size(20);
    g.bench_function("detector_f32_sigma1.5_1920x1080", |b| {
        b.iter(|| filter::gaussian_blur(&hd, 1.5))
    });
    let ip =
        image::ImageBuffer::<image::Luma<f32>, Vec<f32>>::from_raw(1920, 1080, hd.data().to_vec())
            .expect("sizes match");
    g.bench_function("imageproc_f32_sigma1.5_1920x1080", |b| {
        b.iter(|| imageproc::filter::gaussian_blur_f32(&ip, 1.5))
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
