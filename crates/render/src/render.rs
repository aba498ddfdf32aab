//! The rendering entry points: one view (quantised, or noiseless for Cramer-Rao bounds), its
//! truth alone, or every view in parallel.

use rayon::prelude::*;

use crate::error::RenderError;
use crate::image::{FloatImage, GreyImage};
use crate::photometry::{noiseless_levels, quantise};
use crate::raster::{FaceView, optical_image};
use crate::scene::Scene;
use crate::truth::{ViewTruth, view_truth};

/// A rendered view: the quantised image and its ground truth.
#[derive(Clone, Debug)]
pub struct RenderedView {
    /// The image, 8- or 16-bit as the scene says.
    pub image: GreyImage,
    /// Its ground truth.
    pub truth: ViewTruth,
}

/// A view before noise and quantisation.
#[derive(Clone, Debug)]
pub struct NoiselessView {
    /// Blurred reflectance per pixel, `0..1`, before any photometry.
    pub optical: FloatImage,
    /// Grey levels on the 8-bit scale after illumination, vignetting, contrast and gamma:
    /// the expected value of each pixel. Its noise variance is [`Scene::noise_variance`].
    pub levels: FloatImage,
    /// Its ground truth.
    pub truth: ViewTruth,
}

fn pose_of(scene: &Scene, index: usize) -> Result<facetcal_model::Pose, RenderError> {
    scene
        .poses()
        .get(index)
        .copied()
        .ok_or(RenderError::NoSuchView { index, count: scene.view_count() })
}

/// The ground truth of view `index` without rendering it.
pub fn view_truth_of(scene: &Scene, index: usize) -> Result<ViewTruth, RenderError> {
    let pose = pose_of(scene, index)?;
    let faces: Vec<FaceView> =
        scene.target().faces().iter().map(|f| FaceView::new(f, &pose)).collect();
    Ok(view_truth(scene, index, &pose, &faces))
}

/// Renders view `index` without noise or quantisation.
pub fn render_view_noiseless(scene: &Scene, index: usize) -> Result<NoiselessView, RenderError> {
    let pose = pose_of(scene, index)?;
    let truth = view_truth_of(scene, index)?;
    let optical = optical_image(scene, index, &pose);
    let levels = noiseless_levels(&optical, scene.photometry());
    Ok(NoiselessView { optical, levels, truth })
}

/// Renders view `index`: noise from `SeededRng::stream(seed, index)`, so views render in any
/// order, on any number of threads, to the same bytes.
pub fn render_view(scene: &Scene, index: usize) -> Result<RenderedView, RenderError> {
    let n = render_view_noiseless(scene, index)?;
    let image = quantise(&n.levels, scene.photometry(), scene.bits(), scene.seed(), index);
    Ok(RenderedView { image, truth: n.truth })
}

/// Renders every view on the rayon pool, in view order.
pub fn render_all_par(scene: &Scene) -> Result<Vec<RenderedView>, RenderError> {
    (0..scene.view_count()).into_par_iter().map(|i| render_view(scene, i)).collect()
}
