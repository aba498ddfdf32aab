//! Perspective bias of circle centres: the image of a circle's centre is not the centre of the
//! circle's image (an ellipse). Given the plane-to-image homography `H` and the circle, the
//! exact offset between the two (J. Heikkila, "Geometric camera calibration using circular
//! control points", IEEE TPAMI 22(10), 2000; C. Mallon and P. F. Whelan, "Which pattern?
//! Biasing aspects of planar calibration patterns and detection methods", Pattern Recognition
//! Letters 28(8), 2007):
//!
//! - circle conic `C = [I, -c; -c^T, c^T c - r^2]`, image conic `C' = H^-T C H^-1`;
//! - with `C' = [A, b; b^T, k]` (`A` 2 x 2) the ellipse centre is `e = -A^-1 b`;
//! - the correction is `H c - e`, added to a measured dot centre.

use nalgebra::{Matrix2, Matrix3, Point2, Vector2, Vector3};

use crate::error::DetectError;

/// `H c - e`: what to add to the centre of a circle's image to get the image of its centre.
/// `h` maps plane points `(u, v, 1)` to image points; `centre` and `radius` are in plane
/// units.
pub fn circle_centre_offset(
    h: &Matrix3<f64>,
    centre: Point2<f64>,
    radius: f64,
) -> Result<Vector2<f64>, DetectError> {
    if !(radius.is_finite() && radius > 0.0 && centre.x.is_finite() && centre.y.is_finite()) {
        return Err(DetectError::DegenerateMapping {
            reason: "circle radius must be positive and finite",
        });
    }
    let hi = h
        .try_inverse()
        .ok_or(DetectError::DegenerateMapping { reason: "homography is singular" })?;
    let (cx, cy) = (centre.x, centre.y);
    let c =
        Matrix3::new(1.0, 0.0, -cx, 0.0, 1.0, -cy, -cx, -cy, cx * cx + cy * cy - radius * radius);
    let ci = hi.transpose() * c * hi;
    let a = Matrix2::new(ci[(0, 0)], ci[(0, 1)], ci[(1, 0)], ci[(1, 1)]);
    // An ellipse has a definite A (the circle lies on one side of the vanishing line).
    if a.determinant() <= 0.0 {
        return Err(DetectError::DegenerateMapping {
            reason: "the circle's image is not an ellipse",
        });
    }
    let b = Vector2::new(ci[(0, 2)], ci[(1, 2)]);
    let e = -(a
        .try_inverse()
        .ok_or(DetectError::DegenerateMapping { reason: "image conic is singular" })?
        * b);
    let hc = h * Vector3::new(cx, cy, 1.0);
    if hc.z.abs() < 1e-300 {
        return Err(DetectError::DegenerateMapping {
            reason: "the circle's centre maps to infinity",
        });
    }
    let out = Vector2::new(hc.x / hc.z - e.x, hc.y / hc.z - e.y);
    if out.x.is_finite() && out.y.is_finite() {
        Ok(out)
    } else {
        Err(DetectError::DegenerateMapping { reason: "non-finite result" })
    }
}

/// A measured dot centre corrected to the image of the circle's centre.
pub fn correct_dot_centre(
    measured: Point2<f64>,
    h: &Matrix3<f64>,
    centre: Point2<f64>,
    radius: f64,
) -> Result<Point2<f64>, DetectError> {
    Ok(measured + circle_centre_offset(h, centre, radius)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The centre of an ellipse is its area centroid (a fact of geometry), computed here
    /// independently by the shoelace formula on the projected circle's outline.
    #[test]
    fn offset_matches_the_centroid_of_the_projected_outline() {
        let h = Matrix3::new(900.0, 40.0, 300.0, -30.0, 700.0, 200.0, 0.4, 0.9, 1.0);
        let (c, r) = (Point2::new(0.3, 0.2), 0.05);
        let n = 20000;
        let pts: Vec<Point2<f64>> = (0..n)
            .map(|i| {
                let t = std::f64::consts::TAU * i as f64 / n as f64;
                let q = h * Vector3::new(c.x + r * t.cos(), c.y + r * t.sin(), 1.0);
                Point2::new(q.x / q.z, q.y / q.z)
            })
            .collect();
        let (mut a, mut sx, mut sy) = (0.0, 0.0, 0.0);
        for i in 0..n {
            let (p, q) = (pts[i], pts[(i + 1) % n]);
            let cr = p.x * q.y - q.x * p.y;
            a += cr;
            sx += (p.x + q.x) * cr;
            sy += (p.y + q.y) * cr;
        }
        let centroid = Point2::new(sx / (3.0 * a), sy / (3.0 * a));
        let hc = h * Vector3::new(c.x, c.y, 1.0);
        let expect = Vector2::new(hc.x / hc.z, hc.y / hc.z) - centroid.coords;
        let got = circle_centre_offset(&h, c, r).unwrap();
        assert!(expect.norm() > 0.05, "the test case has a visible bias: {expect}");
        assert!((got - expect).norm() < 1e-5, "{got} vs {expect}");
    }

    #[test]
    fn degenerate_inputs_are_errors() {
        assert!(circle_centre_offset(&Matrix3::zeros(), Point2::new(0.0, 0.0), 1.0).is_err());
        assert!(circle_centre_offset(&Matrix3::identity(), Point2::new(0.0, 0.0), -1.0).is_err());
        // A circle crossing the vanishing line w = 0 (here u = -1) is not imaged as an ellipse.
        let h = Matrix3::new(1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 1.0, 0.0, 1.0);
        assert!(circle_centre_offset(&h, Point2::new(-1.0, 0.0), 0.5).is_err());
    }
}
