//! Beat labels against a coded beat reference: the tool's `N`/`V`/`Q` on the
//! paired beats, tallied by the reference's ANSI/AAMI EC57 class (common
//! practice for beat classifiers). What it is for: the median beats average
//! the beats labelled `N` and `Q` and never those labelled `V`, so a normal
//! beat labelled `V` is lost to the QT and an ectopic beat labelled `N` or `Q`
//! may enter it if it passes the correlation test; and users who benchmark
//! beat classification read the table directly.

use crate::report::{LabelRow, LabelSection};
use tendline_formats::annotation::symbol_of;

/// Reference classes in table order.
pub const CLASSES: [&str; 5] = ["N", "S", "V", "F", "Q"];

/// EC57 class of a WFDB beat code: `N L R e j` → N, `A a J S` → S, `V E` → V,
/// `F` → F, anything else (`/ f Q` ...) → Q.
pub fn aami_class(code: u8) -> &'static str {
    match symbol_of(code) {
        "N" | "L" | "R" | "e" | "j" => "N",
        "A" | "a" | "J" | "S" => "S",
        "V" | "E" => "V",
        "F" => "F",
        _ => "Q",
    }
}

/// Counts by reference class and tool label.
#[derive(Debug, Clone, Default)]
pub struct LabelTally {
    rows: [LabelRow; 5],
}

impl LabelTally {
    /// Add one paired beat: the reference's and the tool's WFDB beat codes.
    pub fn add(&mut self, reference: u8, tool: u8) {
        let k = CLASSES
            .iter()
            .position(|c| *c == aami_class(reference))
            .unwrap_or(4);
        let row = &mut self.rows[k];
        match symbol_of(tool) {
            "N" => row.n += 1,
            "V" => row.v += 1,
            "Q" => row.q += 1,
            _ => row.other += 1,
        }
    }

    /// Whether any beat was added.
    pub fn is_empty(&self) -> bool {
        self.rows.iter().all(|r| r.n + r.v + r.q + r.other == 0)
    }

    /// The report section.
    pub fn finish(self) -> LabelSection {
        let pct = |a: u64, b: u64| (b > 0).then(|| 100.0 * a as f64 / b as f64);
        let total = |r: &LabelRow| r.n + r.v + r.q + r.other;
        let [n, _, v, _, _] = &self.rows;
        let tool_v: u64 = self.rows.iter().map(|r| r.v).sum();
        LabelSection {
            v_sensitivity_pct: pct(v.v, total(v)),
            v_ppv_pct: pct(v.v, tool_v),
            n_sensitivity_pct: pct(n.n, total(n)),
            confusion: self
                .rows
                .iter()
                .zip(CLASSES)
                .map(|(r, c)| LabelRow {
                    reference: c.to_string(),
                    ..r.clone()
                })
                .collect(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use tendline_formats::annotation::code_of;

    fn code(s: &str) -> u8 {
        code_of(s).expect("known WFDB symbol")
    }

    #[test]
    fn classes_follow_ec57() {
        // ANSI/AAMI EC57 beat classes (common practice), from memory.
        for (sym, class) in [
            ("N", "N"),
            ("L", "N"),
            ("R", "N"),
            ("e", "N"),
            ("j", "N"),
            ("A", "S"),
            ("a", "S"),
            ("J", "S"),
            ("S", "S"),
            ("V", "V"),
            ("E", "V"),
            ("F", "F"),
            ("/", "Q"),
            ("f", "Q"),
            ("Q", "Q"),
        ] {
            assert_eq!(aami_class(code(sym)), class, "{sym}");
        }
    }

    #[test]
    fn rates_by_hand() {
        // Invented pairs (a logic check): 3 N beats (2 labelled N, 1 Q),
        // 2 V beats (1 labelled V, 1 N), 1 paced beat labelled V.
        let mut t = LabelTally::default();
        for (r, s) in [
            ("N", "N"),
            ("N", "N"),
            ("L", "Q"),
            ("V", "V"),
            ("V", "N"),
            ("/", "V"),
        ] {
            t.add(code(r), code(s));
        }
        let s = t.finish();
        assert_eq!(s.n_sensitivity_pct, Some(200.0 / 3.0));
        assert_eq!(s.v_sensitivity_pct, Some(50.0));
        assert_eq!(s.v_ppv_pct, Some(50.0));
        assert_eq!(
            s.confusion[0],
            LabelRow {
                reference: "N".into(),
                n: 2,
                v: 0,
                q: 1,
                other: 0
            }
        );
        assert_eq!(s.confusion[4].v, 1);
    }
}
