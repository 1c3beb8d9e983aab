//! Heart-rate correction of QT: the four published formulas.
//!
//! Units throughout: QT and QTc in milliseconds, RR in seconds, heart rate in
//! beats per minute. Non-finite or non-positive RR/HR gives `NaN`, so a caller
//! never receives a plausible-looking number from an impossible input.

/// Bazett: QTc = QT / RR^(1/2) (Bazett 1920, Heart 7:353-370).
pub fn bazett(qt_ms: f64, rr_s: f64) -> f64 {
    if !(rr_s.is_finite() && rr_s > 0.0) {
        return f64::NAN;
    }
    qt_ms / rr_s.sqrt()
}

/// Fridericia: QTc = QT / RR^(1/3) (Fridericia 1920, Acta Med Scand 53:469-486).
pub fn fridericia(qt_ms: f64, rr_s: f64) -> f64 {
    if !(rr_s.is_finite() && rr_s > 0.0) {
        return f64::NAN;
    }
    qt_ms / rr_s.cbrt()
}

/// Framingham: QTc = QT + 154·(1 − RR) (Sagie et al. 1992, Am J Cardiol 70:797-801).
pub fn framingham(qt_ms: f64, rr_s: f64) -> f64 {
    if !(rr_s.is_finite() && rr_s > 0.0) {
        return f64::NAN;
    }
    qt_ms + 154.0 * (1.0 - rr_s)
}

/// Hodges: QTc = QT + 1.75·(HR − 60) (Hodges et al. 1983, J Am Coll Cardiol 1:694; from memory).
pub fn hodges(qt_ms: f64, hr_bpm: f64) -> f64 {
    if !(hr_bpm.is_finite() && hr_bpm > 0.0) {
        return f64::NAN;
    }
    qt_ms + 1.75 * (hr_bpm - 60.0)
}

/// Heart rate (bpm) from RR in milliseconds: 60 000 / RR.
pub fn hr_from_rr_ms(rr_ms: f64) -> f64 {
    if !(rr_ms.is_finite() && rr_ms > 0.0) {
        return f64::NAN;
    }
    60_000.0 / rr_ms
}

/// All four corrections of one QT at one RR (ms).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AllQtc {
    pub bazett_ms: f64,
    pub fridericia_ms: f64,
    pub framingham_ms: f64,
    pub hodges_ms: f64,
}

/// Every formula at once; `rr_ms` is converted to seconds and to bpm as each formula needs.
pub fn all(qt_ms: f64, rr_ms: f64) -> AllQtc {
    let rr_s = rr_ms / 1000.0;
    AllQtc {
        bazett_ms: bazett(qt_ms, rr_s),
        fridericia_ms: fridericia(qt_ms, rr_s),
        framingham_ms: framingham(qt_ms, rr_s),
        hodges_ms: hodges(qt_ms, hr_from_rr_ms(rr_ms)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Worked example computed from the published expressions (issue #9):
    // QT 360 ms at RR 640 ms (HR 93.75 bpm) gives Bazett 450.0, Fridericia 417.7,
    // Framingham 415.4, Hodges 419.1 ms.
    #[test]
    fn worked_values_qt360_rr640() {
        let qt = 360.0;
        let rr = 0.640;
        let hr = hr_from_rr_ms(640.0);
        assert!((hr - 93.75).abs() < 1e-12);
        // Bazett 1920, Heart 7:353-370.
        assert!((bazett(qt, rr) - 450.0).abs() <= 0.05, "{}", bazett(qt, rr));
        // Fridericia 1920, Acta Med Scand 53:469-486.
        assert!(
            (fridericia(qt, rr) - 417.7).abs() <= 0.05,
            "{}",
            fridericia(qt, rr)
        );
        // Sagie et al. 1992, Am J Cardiol 70:797-801.
        assert!(
            (framingham(qt, rr) - 415.4).abs() <= 0.05,
            "{}",
            framingham(qt, rr)
        );
        // Hodges et al. 1983, J Am Coll Cardiol 1:694 (from memory).
        assert!((hodges(qt, hr) - 419.1).abs() <= 0.05, "{}", hodges(qt, hr));
        let a = all(qt, 640.0);
        assert_eq!(a.bazett_ms, bazett(qt, rr));
        assert_eq!(a.hodges_ms, hodges(qt, hr));
    }

    // Every published formula is normalised to RR = 1 s (HR 60 bpm): QTc = QT there.
    #[test]
    fn rr_one_second_returns_qt() {
        for qt in [300.0, 412.5, 560.0] {
            assert_eq!(bazett(qt, 1.0), qt);
            assert_eq!(fridericia(qt, 1.0), qt);
            assert_eq!(framingham(qt, 1.0), qt);
            assert_eq!(hodges(qt, 60.0), qt);
            let a = all(qt, 1000.0);
            assert_eq!(
                [a.bazett_ms, a.fridericia_ms, a.framingham_ms, a.hodges_ms],
                [qt; 4]
            );
        }
    }

    #[test]
    fn impossible_rr_gives_nan() {
        assert!(bazett(400.0, 0.0).is_nan());
        assert!(fridericia(400.0, -1.0).is_nan());
        assert!(framingham(400.0, f64::NAN).is_nan());
        assert!(hodges(400.0, 0.0).is_nan());
    }
}
