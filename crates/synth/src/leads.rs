//! The 12 standard leads as axes onto which a heart vector is projected.
//!
//! Coordinates: x points to the subject's left, y downwards (inferior), z to
//! the front (anterior). Limb and augmented leads lie in the frontal (x–y)
//! plane, precordial leads in the horizontal (x–z) plane.
//!
//! * Limb leads at I 0°, II 60°, III 120° (Einthoven triangle) and augmented
//!   leads at aVR −150°, aVL −30°, aVF 90° (hexaxial reference system, common
//!   practice). The augmented leads carry the factor √3/2 that Goldberger's
//!   definitions imply for an ideal triangle (aVF = (II + III)/2 etc.), so the
//!   six frontal leads satisfy Einthoven's law III = II − I and
//!   aVR + aVL + aVF = 0 exactly.
//! * Precordial leads at V1 115°, V2 95°, V3 75°, V4 55°, V5 30°, V6 0°
//!   measured from the left (x) towards the front (z) (from memory), with a gain
//!   of 1.4 over the limb leads because the electrodes sit close to the heart
//!   (from memory, a round figure).

/// Lead names in the order the generator writes them.
pub const LEAD_NAMES: [&str; 12] = [
    "I", "II", "III", "aVR", "aVL", "aVF", "V1", "V2", "V3", "V4", "V5", "V6",
];

/// Gain of the precordial leads relative to the limb leads.
pub const PRECORDIAL_GAIN: f64 = 1.4;

/// Frontal-plane angles (degrees) of I, II, III, aVR, aVL, aVF.
const FRONTAL_DEG: [f64; 6] = [0.0, 60.0, 120.0, -150.0, -30.0, 90.0];
/// Horizontal-plane angles (degrees, from left towards anterior) of V1..V6.
const PRECORDIAL_DEG: [f64; 6] = [115.0, 95.0, 75.0, 55.0, 30.0, 0.0];

/// Width factor of each lead: the limb leads see the pure dipole (factor 1) so
/// that Einthoven's law holds; the precordial leads add a small non-dipolar
/// local widening, largest over the mid-precordium (invented, modest values).
pub const WIDTH_FACTOR: [f64; 12] = [
    1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.03, 1.05, 1.03, 1.01, 1.0,
];

/// Lead vector of lead `i` (index into [`LEAD_NAMES`]), gain included.
pub fn lead_vector(i: usize) -> [f64; 3] {
    if i < 6 {
        let a = FRONTAL_DEG[i].to_radians();
        let g = if i >= 3 { 3f64.sqrt() / 2.0 } else { 1.0 };
        [g * a.cos(), g * a.sin(), 0.0]
    } else {
        let a = PRECORDIAL_DEG[i - 6].to_radians();
        [PRECORDIAL_GAIN * a.cos(), 0.0, PRECORDIAL_GAIN * a.sin()]
    }
}

/// A heart vector of magnitude `mag` (mV) with frontal angle `frontal_deg`
/// (0 = left, 90 = inferior) and elevation `anterior_deg` out of the frontal
/// plane (positive = anterior).
pub fn heart_vector(mag: f64, frontal_deg: f64, anterior_deg: f64) -> [f64; 3] {
    let a = frontal_deg.to_radians();
    let e = anterior_deg.to_radians();
    [
        mag * a.cos() * e.cos(),
        mag * a.sin() * e.cos(),
        mag * e.sin(),
    ]
}

/// Amplitude (mV) of a heart vector in lead `i`.
pub fn project(v: [f64; 3], i: usize) -> f64 {
    let l = lead_vector(i);
    v[0] * l[0] + v[1] * l[1] + v[2] * l[2]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frontal_leads_obey_einthoven_and_goldberger() {
        // Einthoven's law III = II − I and Goldberger's aVR + aVL + aVF = 0,
        // aVF = (II + III)/2 (handbook relations of the limb leads).
        for k in 0..36 {
            let v = heart_vector(1.3, k as f64 * 10.0, 17.0);
            let p: Vec<f64> = (0..6).map(|i| project(v, i)).collect();
            assert!((p[2] - (p[1] - p[0])).abs() < 1e-12);
            assert!((p[3] + p[4] + p[5]).abs() < 1e-12);
            assert!((p[5] - (p[1] + p[2]) / 2.0).abs() < 1e-12);
            assert!((p[3] + (p[0] + p[1]) / 2.0).abs() < 1e-12);
            assert!((p[4] - (p[0] - p[2]) / 2.0).abs() < 1e-12);
        }
    }

    #[test]
    fn vector_along_lead_ii_is_largest_in_ii() {
        let v = heart_vector(1.0, 60.0, 0.0);
        let p: Vec<f64> = (0..6).map(|i| project(v, i)).collect();
        assert!((p[1] - 1.0).abs() < 1e-12);
        // aVL at −30° is perpendicular to 60°.
        assert!(p[4].abs() < 1e-12);
    }
}
