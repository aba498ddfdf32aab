//! Rigid poses and the small rotation helpers every crate needs.
//!
//! A [`Pose`] maps points of a source frame into a destination frame:
//! `p_dst = R p_src + t`. Poses of views map the target frame to the camera frame; poses of faces
//! map the face frame to the target frame. Inside the program rotations are unit quaternions; in
//! files they are axis-angle vectors (radians, the rotation angle is the vector's norm).

use nalgebra::{Matrix3, Point3, Rotation3, UnitQuaternion, Vector3, Vector6};
use serde::{Deserialize, Serialize};

/// A rigid transformation `p_dst = rotation * p_src + translation`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(from = "PoseFile", into = "PoseFile")]
pub struct Pose {
    /// Rotation part.
    pub rotation: UnitQuaternion<f64>,
    /// Translation part, in the unit of the target file.
    pub translation: Vector3<f64>,
}

/// How a pose is written in every file: an axis-angle vector in radians and a translation.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PoseFile {
    /// Axis-angle rotation vector, radians.
    pub rotation: [f64; 3],
    /// Translation vector.
    pub translation: [f64; 3],
}

impl From<PoseFile> for Pose {
    fn from(f: PoseFile) -> Self {
        Pose::from_axis_angle(Vector3::from(f.rotation), Vector3::from(f.translation))
    }
}

impl From<Pose> for PoseFile {
    fn from(p: Pose) -> Self {
        PoseFile { rotation: p.axis_angle().into(), translation: p.translation.into() }
    }
}

impl Default for Pose {
    fn default() -> Self {
        Pose::identity()
    }
}

impl Pose {
    /// The identity transformation.
    pub fn identity() -> Self {
        Pose { rotation: UnitQuaternion::identity(), translation: Vector3::zeros() }
    }

    /// A pose from an axis-angle vector (radians) and a translation.
    pub fn from_axis_angle(axis_angle: Vector3<f64>, translation: Vector3<f64>) -> Self {
        Pose { rotation: UnitQuaternion::from_scaled_axis(axis_angle), translation }
    }

    /// A pose from a rotation matrix that is already orthonormal with determinant +1.
    pub fn from_matrix(rotation: &Matrix3<f64>, translation: Vector3<f64>) -> Self {
        Pose {
            rotation: UnitQuaternion::from_rotation_matrix(&Rotation3::from_matrix_unchecked(
                *rotation,
            )),
            translation,
        }
    }

    /// The rotation as an axis-angle vector, radians, angle in `[0, pi]`.
    pub fn axis_angle(&self) -> Vector3<f64> {
        self.rotation.scaled_axis()
    }

    /// The rotation matrix.
    pub fn matrix(&self) -> Matrix3<f64> {
        self.rotation.to_rotation_matrix().into_inner()
    }

    /// Maps a point of the source frame into the destination frame.
    pub fn transform(&self, p: &Point3<f64>) -> Point3<f64> {
        self.rotation * p + self.translation
    }

    /// The inverse transformation.
    pub fn inverse(&self) -> Pose {
        let r = self.rotation.inverse();
        Pose { rotation: r, translation: -(r * self.translation) }
    }

    /// `self * other`: first `other`, then `self`.
    pub fn compose(&self, other: &Pose) -> Pose {
        Pose {
            rotation: self.rotation * other.rotation,
            translation: self.rotation * other.translation + self.translation,
        }
    }

    /// The pose after a left increment `delta = [omega, dt]`:
    /// `R' = exp([omega]x) R`, `t' = t + dt`. This is the parametrisation of every pose Jacobian
    /// in the project (see [`crate::camera::Camera::project_with_jacobians`]).
    pub fn perturbed(&self, delta: &Vector6<f64>) -> Pose {
        let omega = Vector3::new(delta[0], delta[1], delta[2]);
        let dt = Vector3::new(delta[3], delta[4], delta[5]);
        Pose {
            rotation: UnitQuaternion::from_scaled_axis(omega) * self.rotation,
            translation: self.translation + dt,
        }
    }

    /// The angle between the two rotations, radians.
    pub fn angle_to(&self, other: &Pose) -> f64 {
        self.rotation.angle_to(&other.rotation)
    }
}

/// The cross-product matrix `[v]x`, with `[v]x w = v x w`.
pub fn cross_matrix(v: &Vector3<f64>) -> Matrix3<f64> {
    Matrix3::new(0.0, -v.z, v.y, v.z, 0.0, -v.x, -v.y, v.x, 0.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn file_form_round_trips() {
        let p = Pose::from_axis_angle(Vector3::new(0.1, -0.4, 2.0), Vector3::new(1.0, 2.0, 3.0));
        let text = serde_json::to_string(&p).unwrap();
        let q: Pose = serde_json::from_str(&text).unwrap();
        assert!((p.axis_angle() - q.axis_angle()).norm() < 1e-14);
        assert_eq!(p.translation, q.translation);
    }

    #[test]
    fn inverse_composes_to_identity() {
        let p = Pose::from_axis_angle(Vector3::new(0.3, 0.2, -0.1), Vector3::new(-4.0, 1.0, 9.0));
        let x = Point3::new(0.5, -2.0, 7.0);
        let back = p.inverse().transform(&p.transform(&x));
        assert!((back - x).norm() < 1e-12);
        let i = p.compose(&p.inverse());
        assert!(i.axis_angle().norm() < 1e-12 && i.translation.norm() < 1e-12);
    }

    #[test]
    fn axis_angle_matches_rodrigues_formula() {
        // Rodrigues' rotation formula, common practice: R = I + sin(a) K + (1 - cos(a)) K^2.
        let v = Vector3::new(0.2f64, -0.5, 0.7);
        let a: f64 = v.norm();
        let k = cross_matrix(&(v / a));
        let r = Matrix3::identity() + k * a.sin() + k * k * (1.0 - a.cos());
        let p = Pose::from_axis_angle(v, Vector3::zeros());
        assert!((p.matrix() - r).norm() < 1e-14);
    }
}
