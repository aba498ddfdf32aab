//! The grey-level encoding an image is stored in, and its inverse.
//!
//! A blurred edge crosses the level midway between its two sides in light at the edge itself,
//! whatever the blur; in stored levels the midway level moves with the encoding, and the
//! crossing with it by a fraction of the blur radius (outward where the encoding darkens mid
//! tones). Square outlines are measured at such crossings, so the detector takes their levels
//! in light: the encoding is monotone, so the crossing of the stored profile with the stored
//! value of the midway light level is the crossing in light, and the image itself is left as
//! stored. Checker corners (saddle points) and dot centres (of symmetric blobs) do not move
//! under a monotone encoding, and converting the image would only amplify the noise and
//! quantisation of the compressed end of the scale.
//!
//! Conventions: normalised levels, full scale 1. `Gamma(g)` stores `linear^(1/g)` (so `g` above
//! 1 brightens mid tones, as display encodings do); `Srgb` is the piecewise curve of IEC
//! 61966-2-1.

use std::fmt;
use std::str::FromStr;

use crate::error::DetectError;

/// How an image's grey levels encode linear light.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub enum Encoding {
    /// Levels proportional to light (raw sensor data, most machine-vision cameras' default).
    #[default]
    Linear,
    /// The sRGB curve (IEC 61966-2-1), what most consumer cameras and phones write.
    Srgb,
    /// A pure power law: stored level `linear^(1/g)`, `g` in [0.1, 10].
    Gamma(f64),
}

impl Encoding {
    /// The linear level of a stored level (both normalised, full scale 1); levels outside
    /// [0, 1] are clamped first.
    pub fn to_linear(self, v: f64) -> f64 {
        let v = v.clamp(0.0, 1.0);
        match self {
            Encoding::Linear => v,
            // IEC 61966-2-1: the linear segment below 0.04045, the 2.4 power above.
            Encoding::Srgb if v <= 0.04045 => v / 12.92,
            Encoding::Srgb => ((v + 0.055) / 1.055).powf(2.4),
            Encoding::Gamma(g) => v.powf(g),
        }
    }

    /// The stored level of a linear level, the inverse of [`Encoding::to_linear`].
    pub fn from_linear(self, v: f64) -> f64 {
        let v = v.clamp(0.0, 1.0);
        match self {
            Encoding::Linear => v,
            Encoding::Srgb if v <= 0.0031308 => v * 12.92,
            Encoding::Srgb => 1.055 * v.powf(1.0 / 2.4) - 0.055,
            Encoding::Gamma(g) => v.powf(1.0 / g),
        }
    }

    /// The stored level a fraction `f` of the way from stored level `lo` to `hi` in light:
    /// the level where a blurred edge between them lies at that fraction of its rise.
    pub fn between(self, lo: f64, hi: f64, f: f64) -> f64 {
        match self {
            Encoding::Linear => lo + f * (hi - lo),
            _ => {
                let (a, b) = (self.to_linear(lo), self.to_linear(hi));
                self.from_linear(a + f * (b - a))
            }
        }
    }

    /// Checks the gamma's range.
    pub fn validate(self) -> Result<(), DetectError> {
        match self {
            Encoding::Gamma(g) if !(g.is_finite() && (0.1..=10.0).contains(&g)) => {
                Err(DetectError::InvalidOption {
                    field: "encoding",
                    value: g,
                    reason: "gamma must lie in [0.1, 10]",
                })
            }
            _ => Ok(()),
        }
    }
}

impl fmt::Display for Encoding {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Encoding::Linear => write!(f, "linear"),
            Encoding::Srgb => write!(f, "srgb"),
            Encoding::Gamma(g) => write!(f, "gamma={g}"),
        }
    }
}

/// Why an encoding's text was not understood.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("\"{0}\" is not an encoding: expected linear, srgb or gamma=G with G in [0.1, 10]")]
pub struct EncodingParseError(pub String);

/// Written in files as its text (`"srgb"`, `"gamma=2.2"`).
impl serde::Serialize for Encoding {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

impl<'de> serde::Deserialize<'de> for Encoding {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Encoding, D::Error> {
        let text = String::deserialize(d)?;
        text.parse().map_err(serde::de::Error::custom)
    }
}

impl FromStr for Encoding {
    type Err = EncodingParseError;

    /// `linear`, `srgb` or `gamma=G` (case-insensitive).
    fn from_str(s: &str) -> Result<Encoding, EncodingParseError> {
        let t = s.trim().to_ascii_lowercase();
        let bad = || EncodingParseError(s.to_string());
        let enc = match t.as_str() {
            "linear" => Encoding::Linear,
            "srgb" => Encoding::Srgb,
            _ => {
                let g = t.strip_prefix("gamma=").ok_or_else(bad)?;
                Encoding::Gamma(g.trim().parse::<f64>().map_err(|_| bad())?)
            }
        };
        enc.validate().map_err(|_| bad())?;
        Ok(enc)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// IEC 61966-2-1 (sRGB): the curve's published constants meet at the breakpoint (0.04045
    /// stored is 0.0031308 linear, the encoding side's threshold, both from the standard), and
    /// mid grey 0.5 stored is 0.21404 linear (a commonly quoted value, from memory).
    #[test]
    fn srgb_follows_the_standard() {
        let e = Encoding::Srgb;
        assert!((e.to_linear(0.04045) - 0.0031308).abs() < 1e-7);
        assert!((e.to_linear(0.040451) - 0.0031308).abs() < 1e-6, "continuous");
        assert!((e.to_linear(0.5) - 0.21404).abs() < 1e-5);
        assert_eq!(e.to_linear(0.0), 0.0);
        assert!((e.to_linear(1.0) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn gamma_is_a_power_law_and_linear_is_identity() {
        assert!((Encoding::Gamma(2.0).to_linear(0.5) - 0.25).abs() < 1e-12);
        assert!((Encoding::Gamma(0.5).to_linear(0.25) - 0.5).abs() < 1e-12);
        assert_eq!(Encoding::Linear.to_linear(0.3), 0.3);
        assert_eq!(Encoding::Gamma(2.0).to_linear(1.5), 1.0, "clamped");
    }

    #[test]
    fn text_round_trips_and_bad_text_is_refused() {
        for e in [Encoding::Linear, Encoding::Srgb, Encoding::Gamma(2.2), Encoding::Gamma(0.45)] {
            assert_eq!(e.to_string().parse::<Encoding>(), Ok(e));
        }
        assert_eq!(" sRGB ".parse::<Encoding>(), Ok(Encoding::Srgb));
        for bad in ["", "gamma", "gamma=", "gamma=0", "gamma=11", "gamma=nan", "log"] {
            assert!(bad.parse::<Encoding>().is_err(), "{bad}");
        }
        assert!(Encoding::Gamma(20.0).validate().is_err());
    }

    #[test]
    fn from_linear_inverts_to_linear() {
        for e in [Encoding::Linear, Encoding::Srgb, Encoding::Gamma(0.5), Encoding::Gamma(2.2)] {
            for k in 0..=100 {
                let v = k as f64 / 100.0;
                assert!((e.to_linear(e.from_linear(v)) - v).abs() < 1e-12, "{e} {v}");
            }
            // A quarter of the way in light from 0.2 to 0.9 stored.
            let q = e.between(0.2, 0.9, 0.25);
            let want = 0.75 * e.to_linear(0.2) + 0.25 * e.to_linear(0.9);
            assert!((e.to_linear(q) - want).abs() < 1e-12);
        }
        assert_eq!(Encoding::Linear.between(0.2, 0.6, 0.5), 0.4);
    }
}
