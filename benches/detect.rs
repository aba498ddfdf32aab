//! Detector speed and working memory (criterion; run with `cargo bench --bench detect`).
//!
//! - `checker/<w>x<h>`: `detect` on a rendered checkerboard view, checker kind only (corners
//!   and face-code marks), one thread (the detector uses none of its own);
//!   `checker/corners_only_1920x1080` the corner stage alone. 1920 x 1080 is the figure of the contributor
//!   guide; 960 x 540 and a 2 x 2 tiling at 3840 x 2160 show the cost against the pixel count.
//! - `squares/1920x1080`: `detect` on a rendered square grid, square kind (squares and their
//!   marks), one thread.
//! - `blur/*`: the detector's separable `f32` Gaussian against
//!   `imageproc::filter::gaussian_blur_f32`, the reason the detector has its own.
//! - `regions/*`: the blob stage's local-mean threshold and 8-connected labelling
//!   (`count_regions`: sliding integer box sums, runs, union-find over runs) against the same
//!   threshold from `imageproc::integral_image` and two `imageproc` `connected_components`
//!   passes on the 8-bit image, the reason the detector labels runs itself.
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
    target_image("checkerboard", width, height)
}

/// A bundled target (faces of about 280 x 220 mm) filling most of the height, slightly turned.
fn target_image(name: &str, width: u32, height: u32) -> GreyImage {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let path = root.join(format!("targets/{name}.json"));
    let target = Target::load(&path).expect("bundled target loads");
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

    // Square grid (70 squares of about 75 px, every square's four sides fitted three times).
    let squares = target_image("square-grid", 1920, 1080);
    let square_opts = DetectorOptions::for_kind(PatternKind::SquareGrid);
    println!(
        "square-grid 1920x1080: {} squares",
        detect(&squares, &square_opts).expect("detects").squares.len()
    );
    let mut g = c.benchmark_group("squares");
    g.sample_size(20);
    g.bench_function("1920x1080", |b| b.iter(|| detect(&squares, &square_opts).expect("detects")));
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

    let mut g = c.benchmark_group("regions");
    g.sample_size(20);
    let opts = DetectorOptions::for_kind(PatternKind::Checkerboard);
    g.bench_function("detector_runs_1920x1080", |b| {
        b.iter(|| facetcal_detector::count_regions(&hd, &opts))
    });
    let grey8 = image::GrayImage::from_raw(
        1920,
        1080,
        hd.data().iter().map(|&v| (v * 255.0).round() as u8).collect(),
    )
    .expect("sizes match");
    g.bench_function("imageproc_1920x1080", |b| {
        b.iter(|| imageproc_regions(&grey8, opts.threshold_radius as u32, opts.min_contrast))
    });
    g.finish();
}

/// The blob stage's threshold and labelling written with `imageproc`: integral image, local
/// mean over the clipped square of radius `r`, dark and light masks, two labellings.
fn imageproc_regions(img: &image::GrayImage, r: u32, min_contrast: f64) -> usize {
    use imageproc::integral_image::{integral_image, sum_image_pixels};
    use imageproc::region_labelling::{Connectivity, connected_components};
    let (w, h) = img.dimensions();
    let ii = integral_image::<_, u32>(img);
    let delta = min_contrast / 4.0 * 255.0;
    let mut dark = image::GrayImage::new(w, h);
    let mut light = image::GrayImage::new(w, h);
    for y in 0..h {
        let (y0, y1) = (y.saturating_sub(r), (y + r).min(h - 1));
        for x in 0..w {
            let (x0, x1) = (x.saturating_sub(r), (x + r).min(w - 1));
            let n = ((x1 - x0 + 1) * (y1 - y0 + 1)) as f64;
            let m = sum_image_pixels(&ii, x0, y0, x1, y1)[0] as f64 / n;
            let v = img.get_pixel(x, y)[0] as f64;
            if v < m - delta {
                dark.put_pixel(x, y, image::Luma([255]));
            } else if v > m + delta {
                light.put_pixel(x, y, image::Luma([255]));
            }
        }
    }
    let count = |mask: &image::GrayImage| {
        connected_components(mask, Connectivity::Eight, image::Luma([0u8]))
            .pixels()
            .map(|p| p[0])
            .max()
            .unwrap_or(0) as usize
    };
    count(&dark) + count(&light)
}

criterion_group!(benches, bench);
criterion_main!(benches);
