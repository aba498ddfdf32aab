//! The entry points: [`calibrate`] (intrinsics, distortion and poses from several views),
//! [`estimate_pose`] (one view, known camera) and [`initial_camera`] (the closed-form start),
//! and the result type [`Calibration`].

use facetcal_model::files::{
    CALIBRATION_FORMAT, CalibrationFile, Correlation, FILES_VERSION, FaceResult, FreeParameters,
    ParameterEstimate, ParameterStatus, RejectedPoint, SolverRecord, ViewResult, ViewStatus,
    WarningRecord,
};
use facetcal_model::{Camera, DistortionKind, FeatureId, Intrinsics, Pose, PoseFile, Unit};
use nalgebra::{DMatrix, Matrix3, Point2, Point3, Vector2};

use crate::error::SolverError;
use crate::linear::{self, LINE_LIMIT, PLANAR_LIMIT};
use crate::options::Options;
use crate::refine::{Layout, State, ViewData, minimise, total_cost};
use crate::summary::{Summary, Termination};
use crate::uncertainty::covariance;

/// One observed target point.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Observation {
    /// The feature, when known (the target self-survey groups points by `id.face`).
    pub id: Option<FeatureId>,
    /// The point in the target frame.
    pub target: Point3<f64>,
    /// The observed pixel.
    pub image: Point2<f64>,
}

/// The observations of one image.
#[derive(Clone, Debug, PartialEq)]
pub struct ViewObservations {
    /// A name for the view.
    pub name: String,
    /// Its points.
    pub points: Vec<Observation>,
}

/// The estimated correction of one face (target self-survey): the nominal target-frame points
/// `X` of the face become `R X + t`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FaceCorrection {
    /// The face id.
    pub face: u32,
    /// The correction.
    pub correction: Pose,
    /// Standard deviations of `[omega (rad), t]` of the left increment.
    pub std_dev: [f64; 6],
}

/// Something the data do not constrain well.
#[derive(Clone, Debug, PartialEq)]
pub struct Warning {
    /// `weak-parameter`, `strong-correlation`, `rank-deficient`, `not-converged`,
    /// `view-dropped`.
    pub kind: &'static str,
    /// The parameters concerned.
    pub parameters: Vec<String>,
    /// A sentence for a person.
    pub message: String,
}

/// The result of [`calibrate`].
#[derive(Clone, Debug)]
pub struct Calibration {
    /// The calibrated camera.
    pub camera: Camera,
    /// Names of the views, in input order.
    pub view_names: Vec<String>,
    /// Target-to-camera pose per view (`None` if the view was dropped).
    pub poses: Vec<Option<Pose>>,
    /// Standard deviations of each pose's `[omega (rad), t]`.
    pub pose_std_dev: Vec<Option<[f64; 6]>>,
    /// Why a view was dropped.
    pub drop_reasons: Vec<Option<String>>,
    /// Face corrections (target self-survey), empty unless requested.
    pub faces: Vec<FaceCorrection>,
    /// Every camera parameter, in parameter-vector order, with status and standard deviation.
    pub parameters: Vec<ParameterEstimate>,
    /// Names of the shared estimated parameters (free camera columns, then face increments).
    pub estimated: Vec<String>,
    /// Their covariance (scaled by the residual variance).
    pub covariance: DMatrix<f64>,
    /// Their correlation.
    pub correlation: DMatrix<f64>,
    /// The residual variance `sigma^2`, pixels squared.
    pub sigma2: f64,
    /// Residual `observed - projected` of every input point, per view in input order (empty
    /// for dropped views; a point outside the model's domain at the solution gets zeros).
    pub residuals: Vec<Vec<Vector2<f64>>>,
    /// Whether each point was used.
    pub inlier: Vec<Vec<bool>>,
    /// Points rejected by the outlier test.
    pub rejected: Vec<RejectedPoint>,
    /// What the solver did.
    pub summary: Summary,
    /// What the data do not constrain.
    pub warnings: Vec<Warning>,
}

impl Calibration {
    /// The calibration result file (`program`, `inputs` and `verdict` left empty for the
    /// caller). The caller checks it with [`CalibrationFile::to_json`] before writing.
    pub fn to_file(&self, unit: Unit) -> CalibrationFile {
        let views = (0..self.view_names.len())
            .map(|v| ViewResult {
                name: self.view_names[v].clone(),
                status: if self.poses[v].is_some() {
                    ViewStatus::Used
                } else {
                    ViewStatus::Dropped
                },
                reason: self.drop_reasons[v].clone(),
                pose: self.poses[v].map(PoseFile::from),
                pose_std_dev: self.pose_std_dev[v],
                rms_px: self.summary.view_rms_px[v],
                residuals: self.residuals[v].iter().map(|r| [r.x, r.y]).collect(),
                ids: vec![],
                observed: vec![],
            })
            .collect();
        let n = self.estimated.len();
        let termination = self.summary.termination;
        CalibrationFile {
            format: CALIBRATION_FORMAT.into(),
            version: FILES_VERSION,
            program: None,
            unit,
            camera: self.camera,
            parameters: self.parameters.clone(),
            correlation: Correlation {
                names: self.estimated.clone(),
                matrix: (0..n)
                    .map(|i| (0..n).map(|j| self.correlation[(i, j)]).collect())
                    .collect(),
            },
            rms_px: self.summary.rms_px,
            views,
            rejected: self.rejected.clone(),
            faces: self
                .faces
                .iter()
                .map(|f| FaceResult {
                    face: f.face,
                    correction: f.correction.into(),
                    std_dev: f.std_dev,
                    pose: None,
                })
                .collect(),
            summary: SolverRecord {
                iterations: self.summary.iterations,
                initial_cost: self.summary.initial_cost,
                final_cost: self.summary.final_cost,
                termination: termination.name().into(),
                usable: self.summary.is_usable(),
                message: self.summary.brief_report(),
            },
            warnings: self
                .warnings
                .iter()
                .map(|w| WarningRecord {
                    kind: w.kind.into(),
                    parameters: w.parameters.clone(),
                    message: w.message.clone(),
                })
                .collect(),
            target_file: None,
            inputs: vec![],
            verdict: None,
        }
    }
}

fn check_views(views: &[ViewObservations]) -> Result<(), SolverError> {
    if views.is_empty() {
        return Err(SolverError::TooFewViews { got: 0, need: 1, reason: "calibration".into() });
    }
    for (v, view) in views.iter().enumerate() {
        for (k, p) in view.points.iter().enumerate() {
            if !(p.target.coords.iter().all(|x| x.is_finite())
                && p.image.coords.iter().all(|x| x.is_finite()))
            {
                return Err(SolverError::InvalidInput(format!(
                    "view {v} ({}), point {k}: coordinates must be finite",
                    view.name
                )));
            }
        }
    }
    Ok(())
}

/// The local coordinates of a planar point set and the transform from the target frame to the
/// plane frame (`q = A^T (X - c)`).
fn plane_frame(points: &[Point3<f64>]) -> (Vec<Point2<f64>>, Pose) {
    let sp = linear::spread(points);
    let at = sp.axes.transpose();
    let to_plane = Pose::from_matrix(&at, -(at * sp.centroid));
    let local = points
        .iter()
        .map(|x| {
            let q = to_plane.transform(x);
            Point2::new(q.x, q.y)
        })
        .collect();
    (local, to_plane)
}

fn centre(size: (u32, u32)) -> (f64, f64) {
    ((size.0 as f64 - 1.0) / 2.0, (size.1 as f64 - 1.0) / 2.0)
}

/// The closed-form starting camera (distortion coefficients zero) from the views alone.
///
/// If some view has at least 6 points off one plane, the DLT of the largest such view gives
/// `K`; otherwise Zhang's method on the plane-to-image homographies of all views. Fixed
/// parameters take their conventional values: zero skew, `fy = fx`, the principal point at
/// the image centre `((w - 1) / 2, (h - 1) / 2)`.
pub fn initial_camera(
    views: &[ViewObservations],
    image_size: (u32, u32),
    model: DistortionKind,
    free: &FreeParameters,
) -> Result<Camera, SolverError> {
    check_views(views)?;
    let (cx0, cy0) = centre(image_size);
    let mut best: Option<(usize, usize)> = None;
    for (v, view) in views.iter().enumerate() {
        let xs: Vec<Point3<f64>> = view.points.iter().map(|p| p.target).collect();
        let sp = linear::spread(&xs);
        if xs.len() >= 6
            && sp.flatness >= PLANAR_LIMIT
            && sp.thinness >= LINE_LIMIT
            && best.is_none_or(|(_, n)| xs.len() > n)
        {
            best = Some((v, xs.len()));
        }
    }
    let mut intr = if let Some((v, _)) = best {
        let pts: Vec<(Point3<f64>, Point2<f64>)> =
            views[v].points.iter().map(|p| (p.target, p.image)).collect();
        let p = linear::dlt(v, &pts)?;
        let xs: Vec<Point3<f64>> = pts.iter().map(|p| p.0).collect();
        linear::decompose_projection(&p, &xs)?.0
    } else {
        let mut hs = Vec::new();
        for (v, view) in views.iter().enumerate() {
            let xs: Vec<Point3<f64>> = view.points.iter().map(|p| p.target).collect();
            if xs.len() < 4 {
                continue;
            }
            let (local, _) = plane_frame(&xs);
            let pts: Vec<_> = local.into_iter().zip(view.points.iter().map(|p| p.image)).collect();
            hs.push(linear::homography(v, &pts)?);
        }
        if hs.is_empty() {
            let got = views.iter().map(|v| v.points.len()).max().unwrap_or(0);
            return Err(SolverError::TooFewPoints { method: "homography", got, need: 4 });
        }
        if !free.principal_point {
            let f = linear::focal_from_homographies(&hs, cx0, cy0)?;
            Intrinsics { fx: f, fy: f, cx: cx0, cy: cy0, skew: 0.0 }
        } else {
            let need = if free.skew { 3 } else { 2 };
            if hs.len() < need {
                return Err(SolverError::TooFewViews {
                    got: hs.len(),
                    need,
                    reason: format!(
                        "planar views with a free principal point{}: fix the principal point \
                         or add views tilted differently",
                        if free.skew { " and free skew" } else { "" }
                    ),
                });
            }
            let s = 2.0 / (image_size.0 as f64 + image_size.1 as f64);
            let norm = Matrix3::new(s, 0.0, -s * cx0, 0.0, s, -s * cy0, 0.0, 0.0, 1.0);
            linear::zhang_intrinsics(&hs, &norm, !free.skew || hs.len() < 3)?
        }
    };
    if !free.skew {
        intr.skew = 0.0;
    }
    if !free.aspect_ratio {
        let f = 0.5 * (intr.fx + intr.fy);
        intr.fx = f;
        intr.fy = f;
    }
    if !free.principal_point {
        intr.cx = cx0;
        intr.cy = cy0;
    }
    let cam = Camera {
        width: image_size.0,
        height: image_size.1,
        intrinsics: intr,
        distortion: model.zero(),
    };
    cam.validate()?;
    Ok(cam)
}

/// The pose of a view (target frame to camera frame) for a known camera: the linear pose from
/// the undistorted rays (a homography for points in a plane, the DLT otherwise), refined by
/// Levenberg-Marquardt on the reprojection error with the camera fixed.
pub fn estimate_pose(
    camera: &Camera,
    points: &[Observation],
    options: &Options,
) -> Result<Pose, SolverError> {
    options.validate()?;
    camera.validate()?;
    if points.len() < 4 {
        return Err(SolverError::TooFewPoints { method: "pose", got: points.len(), need: 4 });
    }
    let mut rays = Vec::with_capacity(points.len());
    // Without distortion the ray is K^-1 u; the iterative inverse is needed only otherwise.
    let pinhole = camera.distortion.coefficients().iter().all(|&c| c == 0.0);
    for p in points {
        if pinhole {
            let d = camera.intrinsics.to_normalised(&p.image);
            rays.push(Point2::new(d.x, d.y));
            continue;
        }
        let r = camera.unproject(&p.image)?;
        if r.z <= 1e-9 {
            return Err(SolverError::NoPhysicalSolution(
                "a ray points away from the image plane: the linear pose needs a narrower view"
                    .into(),
            ));
        }
        rays.push(Point2::new(r.x / r.z, r.y / r.z));
    }
    let xs: Vec<Point3<f64>> = points.iter().map(|p| p.target).collect();
    let sp = linear::spread(&xs);
    if sp.thinness < LINE_LIMIT {
        return Err(SolverError::PointsOnLine { view: 0, thinness: sp.thinness });
    }
    let pose0 = if sp.flatness < PLANAR_LIMIT || xs.len() < 6 {
        let (local, to_plane) = plane_frame(&xs);
        let pts: Vec<_> = local.into_iter().zip(rays.iter().copied()).collect();
        let h = linear::homography(0, &pts)?;
        linear::pose_from_homography(&Matrix3::identity(), &h)?.compose(&to_plane)
    } else {
        let pts: Vec<_> = xs.iter().copied().zip(rays.iter().copied()).collect();
        let p = linear::dlt(0, &pts)?;
        linear::pose_from_projection(&Matrix3::identity(), &p, &xs)?
    };
    let layout = Layout { cam_columns: vec![], cam_names: vec![], faces: 0 };
    let views = vec![ViewData {
        targets: xs,
        images: points.iter().map(|p| p.image).collect(),
        face_slot: vec![None; points.len()],
        inlier: vec![true; points.len()],
        active: true,
    }];
    let mut state = State { camera: *camera, poses: vec![pose0], faces: vec![] };
    let run = minimise(&mut state, &layout, &views, options);
    if run.termination == Termination::InvalidStart {
        return Err(SolverError::NoPhysicalSolution(
            "the linear pose puts points outside the camera model's domain".into(),
        ));
    }
    Ok(state.poses[0])
}

fn layout_for(camera: &Camera, free: &FreeParameters, faces: usize) -> Layout {
    let mut cols: Vec<Vec<(usize, f64)>> = Vec::new();
    let mut names: Vec<String> = Vec::new();
    let mut push = |c: Vec<(usize, f64)>, n: &str| {
        cols.push(c);
        names.push(n.into());
    };
    let i = &camera.intrinsics;
    if free.aspect_ratio {
        push(vec![(0, 1.0)], "fx");
        push(vec![(1, 1.0)], "fy");
    } else {
        push(vec![(0, 1.0), (1, i.fy / i.fx)], "fx");
    }
    if free.principal_point {
        push(vec![(2, 1.0)], "cx");
        push(vec![(3, 1.0)], "cy");
    }
    if free.skew {
        push(vec![(4, 1.0)], "skew");
    }
    match camera.distortion.kind() {
        DistortionKind::None => {}
        DistortionKind::BrownConrady => {
            push(vec![(5, 1.0)], "k1");
            push(vec![(6, 1.0)], "k2");
            if free.tangential {
                push(vec![(7, 1.0)], "p1");
                push(vec![(8, 1.0)], "p2");
            }
            if free.k3 {
                push(vec![(9, 1.0)], "k3");
            }
        }
        DistortionKind::KannalaBrandt => {
            for (k, n) in ["k1", "k2", "k3", "k4"].iter().enumerate() {
                push(vec![(5 + k, 1.0)], n);
            }
        }
    }
    Layout { cam_columns: cols, cam_names: names, faces }
}

/// Calibrates a camera from the views: closed-form start (unless `guess` is given),
/// Levenberg-Marquardt refinement of the free parameters and one pose per view, outlier
/// rejection, and the uncertainty of every estimate.
///
/// Errors are reserved for input the method cannot solve (degenerate configurations, too few
/// points or views, bad options); a minimisation that stops without converging is reported in
/// [`Summary::termination`].
pub fn calibrate(
    views: &[ViewObservations],
    image_size: (u32, u32),
    model: DistortionKind,
    guess: Option<&Camera>,
    options: &Options,
) -> Result<Calibration, SolverError> {
    options.validate()?;
    check_views(views)?;
    if image_size.0 == 0 || image_size.1 == 0 {
        return Err(SolverError::InvalidInput(format!(
            "image size must be positive, got {}x{}",
            image_size.0, image_size.1
        )));
    }
    let camera = match guess {
        Some(c) => {
            c.validate()?;
            if c.distortion.kind() != model {
                return Err(SolverError::InvalidInput(format!(
                    "the starting camera's model {} differs from the requested {}",
                    c.distortion.kind().name(),
                    model.name()
                )));
            }
            Camera { width: image_size.0, height: image_size.1, ..*c }
        }
        None => initial_camera(views, image_size, model, &options.free)?,
    };

    // Faces of the self-survey: the smallest face id is the reference.
    let mut face_ids: Vec<u32> = if options.survey_faces {
        let mut ids: Vec<u32> = views
            .iter()
            .flat_map(|v| v.points.iter().filter_map(|p| p.id.map(|i| i.face)))
            .collect();
        ids.sort_unstable();
        ids.dedup();
        ids
    } else {
        vec![]
    };
    if options.survey_faces && face_ids.len() < 2 {
        return Err(SolverError::InvalidInput(format!(
            "the target self-survey needs points of at least two faces (feature ids), found {}",
            face_ids.len()
        )));
    }
    let free_faces: Vec<u32> = if face_ids.is_empty() { vec![] } else { face_ids.split_off(1) };
    let layout = layout_for(&camera, &options.free, free_faces.len());

    // Poses, dropping views that cannot be posed.
    let mut data = Vec::with_capacity(views.len());
    let mut poses = Vec::with_capacity(views.len());
    let mut drop_reasons: Vec<Option<String>> = vec![None; views.len()];
    let mut warnings = Vec::new();
    // The starting poses need not be exact: the joint refinement polishes them.
    let pose_options = Options {
        max_rejection_rounds: 0,
        function_tolerance: 1e-6,
        max_iterations: 30,
        ..options.clone()
    };
    for (v, view) in views.iter().enumerate() {
        let n = view.points.len();
        let mut active = true;
        let pose = if n < options.min_points_per_view {
            active = false;
            drop_reasons[v] =
                Some(format!("{n} points, fewer than {} needed", options.min_points_per_view));
            Pose::identity()
        } else {
            match estimate_pose(&camera, &view.points, &pose_options) {
                Ok(p) => p,
                Err(e) => {
                    active = false;
                    drop_reasons[v] = Some(format!("pose not initialised: {e}"));
                    Pose::identity()
                }
            }
        };
        poses.push(pose);
        data.push(ViewData {
            targets: view.points.iter().map(|p| p.target).collect(),
            images: view.points.iter().map(|p| p.image).collect(),
            face_slot: view
                .points
                .iter()
                .map(|p| p.id.and_then(|i| free_faces.iter().position(|&f| f == i.face)))
                .collect(),
            inlier: vec![true; n],
            active,
        });
    }
    if !data.iter().any(|d| d.active) {
        let got = views.iter().map(|v| v.points.len()).max().unwrap_or(0);
        if let Some(reason) = drop_reasons.iter().flatten().next() {
            if got >= options.min_points_per_view {
                return Err(SolverError::NoPhysicalSolution(format!(
                    "no view could be posed: {reason}"
                )));
            }
        }
        return Err(SolverError::TooFewPoints {
            method: "calibration",
            got,
            need: options.min_points_per_view,
        });
    }

    let mut state = State { camera, poses, faces: vec![Pose::identity(); free_faces.len()] };
    let initial_cost = total_cost(&state, &data, &options.loss);
    let mut rejected = Vec::new();
    let mut iterations = 0;
    let mut records = Vec::new();
    let mut rounds = 0;
    let (termination, final_blocks) = loop {
        rounds += 1;
        let run = minimise(&mut state, &layout, &data, options);
        iterations += run.iterations;
        records.extend(run.records);
        if run.termination == Termination::InvalidStart
            || options.reject_sigmas == 0.0
            || rounds > options.max_rejection_rounds
        {
            break (run.termination, run.blocks);
        }
        let threshold = rejection_threshold(&state, &data, options);
        let mut any = false;
        for (v, view) in data.iter_mut().enumerate() {
            if !view.active {
                continue;
            }
            for k in 0..view.targets.len() {
                if !view.inlier[k] {
                    continue;
                }
                let r = state.residual(v, view, k);
                let norm = r.map(|r| r.norm());
                if norm.is_none_or(|n| n > threshold) {
                    view.inlier[k] = false;
                    any = true;
                    let r = r.unwrap_or_default();
                    rejected.push(RejectedPoint {
                        view: v,
                        index: k,
                        id: views[v].points[k].id,
                        residual: [r.x, r.y],
                        residual_px: r.norm(),
                    });
                }
            }
            if view.inliers() < options.min_points_per_view {
                view.active = false;
                drop_reasons[v] = Some(format!(
                    "{} inliers left after outlier rejection, fewer than {}",
                    view.inliers(),
                    options.min_points_per_view
                ));
            }
        }
        if !any {
            break (run.termination, run.blocks);
        }
    };
    if termination == Termination::InvalidStart {
        return Err(SolverError::NoPhysicalSolution(
            "the starting point puts points outside the camera model's domain".into(),
        ));
    }
    let active = data.iter().filter(|d| d.active).count();
    if active == 0 {
        return Err(SolverError::TooFewViews {
            got: 0,
            need: 1,
            reason: "every view was dropped by outlier rejection".into(),
        });
    }
    let inliers: usize = data.iter().filter(|d| d.active).map(|d| d.inliers()).sum();
    let n_params = layout.n_global() + 6 * active;
    let cov = covariance(&state, &layout, &data, final_blocks, 2 * inliers, n_params).ok_or(
        SolverError::TooFewPoints { method: "calibration", got: inliers, need: n_params / 2 + 1 },
    )?;

    // Residuals and RMS.
    let mut residuals = Vec::with_capacity(views.len());
    let mut view_rms = Vec::with_capacity(views.len());
    let (mut sum, mut count) = (0.0, 0usize);
    for (v, view) in data.iter().enumerate() {
        if !view.active {
            residuals.push(vec![]);
            view_rms.push(None);
            continue;
        }
        let rs: Vec<Vector2<f64>> = (0..view.targets.len())
            .map(|k| state.residual(v, view, k).unwrap_or_default())
            .collect();
        let (mut s, mut c) = (0.0, 0usize);
        for (k, r) in rs.iter().enumerate() {
            if view.inlier[k] {
                s += r.norm_squared();
                c += 1;
            }
        }
        sum += s;
        count += c;
        view_rms.push(Some((s / c.max(1) as f64).sqrt()));
        residuals.push(rs);
    }
    let final_cost = total_cost(&state, &data, &options.loss);
    let summary = Summary {
        iterations,
        rounds,
        initial_cost,
        final_cost,
        termination,
        rms_px: (sum / count.max(1) as f64).sqrt(),
        view_rms_px: view_rms,
        inliers,
        rejected: rejected.len(),
        records,
    };

    // Parameters, covariance and correlation.
    let nc = layout.cam_columns.len();
    let mut estimated = layout.cam_names.clone();
    for f in &free_faces {
        for c in ["wx", "wy", "wz", "tx", "ty", "tz"] {
            estimated.push(format!("face{f}.{c}"));
        }
    }
    let ng = layout.n_global();
    let std_of = |i: usize| cov.global[(i, i)].max(0.0).sqrt();
    let correlation = DMatrix::from_fn(ng, ng, |i, j| {
        let d = std_of(i) * std_of(j);
        if i == j {
            1.0
        } else if d > 0.0 {
            (cov.global[(i, j)] / d).clamp(-1.0, 1.0)
        } else {
            0.0
        }
    });
    let values = state.camera.params();
    let parameters = state
        .camera
        .param_names()
        .iter()
        .enumerate()
        .map(|(i, name)| {
            let mut var = 0.0;
            let mut status = ParameterStatus::Fixed;
            for (c, col) in layout.cam_columns.iter().enumerate() {
                for &(idx, coef) in col {
                    if idx != i {
                        continue;
                    }
                    status = if col[0].0 == i {
                        ParameterStatus::Estimated
                    } else {
                        ParameterStatus::Tied
                    };
                    for (d, col2) in layout.cam_columns.iter().enumerate() {
                        for &(idx2, coef2) in col2 {
                            if idx2 == i {
                                var += coef * coef2 * cov.global[(c, d)];
                            }
                        }
                    }
                }
            }
            ParameterEstimate {
                name: (*name).into(),
                value: values[i],
                std_dev: (status != ParameterStatus::Fixed).then(|| var.max(0.0).sqrt()),
                status,
            }
        })
        .collect::<Vec<_>>();
    let faces = free_faces
        .iter()
        .enumerate()
        .map(|(f, &id)| FaceCorrection {
            face: id,
            correction: state.faces[f],
            std_dev: std::array::from_fn(|j| std_of(nc + 6 * f + j)),
        })
        .collect();
    let pose_std_dev = cov
        .poses
        .iter()
        .map(|c| c.map(|c| std::array::from_fn(|j| c[(j, j)].max(0.0).sqrt())))
        .collect();

    // Warnings.
    if !termination.converged() {
        warnings.push(Warning {
            kind: "not-converged",
            parameters: vec![],
            message: format!(
                "the minimisation stopped without converging ({})",
                termination.name()
            ),
        });
    }
    for (v, r) in drop_reasons.iter().enumerate() {
        if let Some(r) = r {
            warnings.push(Warning {
                kind: "view-dropped",
                parameters: vec![],
                message: format!("view {v} ({}) was not used: {r}", views[v].name),
            });
        }
    }
    if let Some(dir) = &cov.null_direction {
        let mut idx: Vec<usize> = (0..ng).collect();
        idx.sort_by(|&a, &b| dir[b].abs().total_cmp(&dir[a].abs()));
        let names: Vec<String> = idx
            .iter()
            .take_while(|&&i| dir[i].abs() > 0.3)
            .map(|&i| estimated[i].clone())
            .collect();
        warnings.push(Warning {
            kind: "rank-deficient",
            message: format!(
                "the data do not determine a combination of {}; fix some of them or add views",
                names.join(", ")
            ),
            parameters: names,
        });
    }
    for i in 0..ng {
        for j in i + 1..ng {
            if correlation[(i, j)].abs() > options.correlation_warning {
                warnings.push(Warning {
                    kind: "strong-correlation",
                    parameters: vec![estimated[i].clone(), estimated[j].clone()],
                    message: format!(
                        "{} and {} are correlated {:+.3}: the data barely tell them apart",
                        estimated[i],
                        estimated[j],
                        correlation[(i, j)]
                    ),
                });
            }
        }
    }
    let (w, h) = (image_size.0 as f64, image_size.1 as f64);
    for p in &parameters {
        let Some(sd) = p.std_dev else { continue };
        let weak = match p.name.as_str() {
            "fx" | "fy" => sd > 0.02 * p.value.abs(),
            "cx" => sd > 0.02 * w,
            "cy" => sd > 0.02 * h,
            _ => false,
        };
        if weak {
            warnings.push(Warning {
                kind: "weak-parameter",
                parameters: vec![p.name.clone()],
                message: format!(
                    "{} = {:.4} has a standard deviation of {:.4}: add views tilted in \
                     different directions",
                    p.name, p.value, sd
                ),
            });
        }
    }

    let mut poses_out = Vec::with_capacity(views.len());
    for (v, d) in data.iter().enumerate() {
        poses_out.push(d.active.then_some(state.poses[v]));
    }
    Ok(Calibration {
        camera: state.camera,
        view_names: views.iter().map(|v| v.name.clone()).collect(),
        poses: poses_out,
        pose_std_dev,
        drop_reasons,
        faces,
        parameters,
        estimated,
        covariance: cov.global,
        correlation,
        sigma2: cov.sigma2,
        residuals,
        inlier: data.iter().map(|d| d.inlier.clone()).collect(),
        rejected,
        summary,
        warnings,
    })
}

/// `max(reject_sigmas * sigma, reject_floor_px)`, `sigma` from the median residual length.
fn rejection_threshold(state: &State, data: &[ViewData], options: &Options) -> f64 {
    let mut norms: Vec<f64> = Vec::new();
    for (v, view) in data.iter().enumerate() {
        if !view.active {
            continue;
        }
        for k in 0..view.targets.len() {
            if view.inlier[k] {
                if let Some(r) = state.residual(v, view, k) {
                    norms.push(r.norm());
                }
            }
        }
    }
    if norms.is_empty() {
        return options.reject_floor_px;
    }
    norms.sort_by(f64::total_cmp);
    let median = norms[norms.len() / 2];
    // The length of a 2-D residual with deviation sigma per axis is Rayleigh distributed,
    // median sqrt(2 ln 2) sigma = 1.1774 sigma.
    let sigma = median / (2.0 * std::f64::consts::LN_2).sqrt();
    (options.reject_sigmas * sigma).max(options.reject_floor_px)
}
