//! Seeded random-mutation robustness test of the HL7 aECG reader: thousands of
//! corrupted versions of a small aECG document (bytes changed, cut, spliced, and
//! attribute values swapped for tricky ones) go through `parse_aecg`; they must
//! return Ok or Err, never panic, and an Ok record must still satisfy the
//! record contract (equal lead lengths > 0, finite fs > 0). Complements the
//! cargo-fuzz target fuzz/fuzz_targets/aecg.rs.

mod mutation_util;

use mutation_util::Rng;
use std::path::Path;

use tendline_formats::aecg::parse_aecg;

/// HL7 aECG layout (from memory of the HL7 v3 aECG standard), two leads.
const SEED: &str = r#"<?xml version="1.0" encoding="UTF-8"?>
<AnnotatedECG xmlns="urn:hl7-org:v3" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">
<effectiveTime><low value="20200101120000"/></effectiveTime>
<componentOf><timepointEvent><componentOf><subjectAssignment><subject><trialSubject><id extension="S1"/>
<subjectDemographicPerson><administrativeGenderCode code="M"/><birthTime value="19700101"/></subjectDemographicPerson>
</trialSubject></subject></subjectAssignment></componentOf></timepointEvent></componentOf>
<component><series><code code="RHYTHM"/><component><sequenceSet>
<component><sequence><code code="TIME_ABSOLUTE"/><value xsi:type="GLIST_TS"><head value="20200101120000"/><increment value="0.002" unit="s"/></value></sequence></component>
<component><sequence><code code="MDC_ECG_LEAD_I"/><value xsi:type="SLIST_PQ"><origin value="0" unit="uV"/><scale value="5" unit="uV"/><digits>1 2 3 4 5 6 7 8</digits></value></sequence></component>
<component><sequence><code code="MDC_ECG_LEAD_II"/><value xsi:type="SLIST_PQ"><origin value="-3" unit="mV"/><scale value="2.5" unit="uV"/><digits>-1 -2 -3 -4 -5 -6 -7 -8</digits></value></sequence></component>
</sequenceSet></component></series></component></AnnotatedECG>
"#;

const VALUES: [&str; 12] = [
    "NaN",
    "inf",
    "-0",
    "0",
    "1e308",
    "-1e308",
    "",
    " ",
    "1e-320",
    "9999999999999999999999",
    "x",
    "&lt;",
];

fn mutate(rng: &mut Rng, seed: &str) -> String {
    let mut s = seed.to_string();
    for _ in 0..1 + rng.below(3) {
        match rng.below(5) {
            0 => {
                // Cut anywhere (on a char boundary: the seed is ASCII).
                let i = rng.below(s.len());
                s.truncate(i);
            }
            1 if !s.is_empty() => {
                // Replace one byte with a printable ASCII character.
                let i = rng.below(s.len());
                let c = (32 + rng.below(95)) as u8 as char;
                s.replace_range(i..i + 1, &c.to_string());
            }
            2 => {
                // Swap one attribute value or digits body for a tricky value.
                let spots: Vec<usize> = s.match_indices("value=\"").map(|(i, _)| i + 7).collect();
                if let Some(&i) = spots.get(rng.below(spots.len())) {
                    if let Some(end) = s[i..].find('"') {
                        s.replace_range(i..i + end, VALUES[rng.below(VALUES.len())]);
                    }
                }
            }
            3 => {
                // Drop one element line.
                let lines: Vec<&str> = s.lines().collect();
                if !lines.is_empty() {
                    let k = rng.below(lines.len());
                    s = lines
                        .iter()
                        .enumerate()
                        .filter(|(i, _)| *i != k)
                        .map(|(_, l)| *l)
                        .collect::<Vec<_>>()
                        .join("\n");
                }
            }
            _ => {
                // Duplicate a slice somewhere else.
                if s.len() > 2 {
                    let a = rng.below(s.len() - 1);
                    let b = a + 1 + rng.below((s.len() - a).min(200));
                    let piece = s[a..b.min(s.len())].to_string();
                    let at = rng.below(s.len());
                    s.insert_str(at, &piece);
                }
            }
        }
    }
    s
}

#[test]
fn mutated_documents_never_panic() {
    let path = Path::new("mutated.xml");
    let base = parse_aecg(SEED, path).expect("seed document reads");
    assert_eq!(base.leads.len(), 2);
    // Lead II: origin -3 mV + 2.5 uV * digit (HL7 SLIST_PQ physical = origin + scale × digit).
    assert!((base.leads[1].samples[0] - (-3.0 - 0.0025)).abs() < 1e-12);
    let mut rng = Rng(0x9e37_79b9_7f4a_7c15);
    let (mut ok, mut err) = (0, 0);
    for _ in 0..5000 {
        let m = mutate(&mut rng, SEED);
        match parse_aecg(&m, path) {
            Ok(r) => {
                ok += 1;
                assert!(r.fs.is_finite() && r.fs > 0.0, "fs {} from\n{m}", r.fs);
                let n = r.n_samples();
                assert!(n > 0 && r.leads.iter().all(|l| l.samples.len() == n), "{m}");
            }
            Err(e) => {
                err += 1;
                assert!(e.to_string().starts_with("mutated.xml: "), "{e}");
            }
        }
    }
    eprintln!("{ok} mutated documents read, {err} rejected");
    // Both outcomes occur: the mutations reach past the XML parser.
    assert!(ok > 100 && err > 100, "ok {ok}, err {err}");
}
