//! What the detector returns. These types are the interface between the detector and the
//! matcher: fields may be added, never silently changed in meaning.
//!
//! All positions are pixels in the project's convention (pixel centres at integer coordinates,
//! top-left pixel centre (0, 0), x right, y down).

use facetcal_model::Ink;
use nalgebra::{Point2, Vector2};

/// A checkerboard X-junction (saddle point).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CheckerCorner {
    /// Subpixel position.
    pub position: Point2<f64>,
    /// Standard deviation of the position along each axis, pixels (from the local fit and the
    /// image noise).
    pub sigma: f64,
    /// Strength of the junction (larger is stronger), in grey levels of the normalised image.
    pub strength: f64,
    /// Unit directions `(cos a, sin a)` of the two edge lines through the junction, each angle
    /// `a` in `[0, pi)` measured from +x towards +y (so, on screen with y down, clockwise).
    /// Convention (sharpened by the detector, used by the matcher to tell the corner's parity):
    /// the sector swept from `edges[0]` to `edges[1]` by increasing angle (less than pi) is
    /// dark, and so is the opposite sector; the two others are light. Measured on the ring of
    /// the ring test, accurate to a few degrees.
    pub edges: [Vector2<f64>; 2],
}

/// A fitted ellipse.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Ellipse {
    /// Centre, pixels.
    pub centre: Point2<f64>,
    /// Semi-major axis, pixels.
    pub semi_major: f64,
    /// Semi-minor axis, pixels.
    pub semi_minor: f64,
    /// Angle of the major axis from the x axis, radians in `(-pi/2, pi/2]`.
    pub angle: f64,
}

/// A dot of a dot grid.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Dot {
    /// Intensity centroid (not corrected for perspective: see the correction function).
    pub centre: Point2<f64>,
    /// Standard deviation of the centre along each axis, pixels.
    pub sigma: f64,
    /// The ellipse fitted to the dot's outline.
    pub ellipse: Ellipse,
    /// Ink of the dot.
    pub ink: Ink,
    /// Area, pixels.
    pub area: f64,
}

/// An isolated dark square.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SquareOutline {
    /// The four corners, subpixel, in clockwise order in the image (x right, y down), starting
    /// with the corner nearest the top-left.
    pub corners: [Point2<f64>; 4],
    /// Standard deviation of a corner along each axis, pixels, from the fit: each side's line
    /// is fitted to its edge points by total least squares, its residual variance `s^2` gives
    /// the variance of the line's position across itself, `s^2 / n + t^2 s^2 / sum t_i^2` at
    /// a distance `t` from the points' centroid (scaled by the number of points per 2 px of
    /// side, since closer points share pixels through the interpolation), and each corner's
    /// covariance follows from the two lines through it; `sigma^2` is the per-axis variance averaged over the four
    /// corners. It counts the image noise and the edge points' scatter, not blur or model
    /// error.
    pub sigma: f64,
}

/// A face-code mark: a small disc of the opposite ink inside a cell, a square or a gap between
/// dots.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Mark {
    /// Centre, pixels.
    pub centre: Point2<f64>,
    /// Equivalent diameter, pixels.
    pub diameter: f64,
    /// Ink of the mark.
    pub ink: Ink,
}

/// Everything the detector found in one image.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Detections {
    /// Image width, pixels.
    pub width: u32,
    /// Image height, pixels.
    pub height: u32,
    /// Checker X-junctions.
    pub checker_corners: Vec<CheckerCorner>,
    /// Dots.
    pub dots: Vec<Dot>,
    /// Isolated squares.
    pub squares: Vec<SquareOutline>,
    /// Face-code marks.
    pub marks: Vec<Mark>,
}
