const LEADS: [&str; 12] = [
    "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
];

type Getter = fn(&BeatMarks) -> Option<Mark>;

pub fn score_record(dir: &std::path::Path, rec: usize, cfg: &DelineateConfig) -> Table {
    let (fs, leads) = load_filtered(dir, &rec.to_string());
    let anns: Vec<Vec<(i64, String)>> = LEADS
        .iter()
        .map(|l| annotations(&dir.join(format!("{rec}.{l}"))))
        .collect();
    let mut qrs: Vec<i64> = anns
        .iter()
        .flat_map(|a| a.iter().filter(|x| x.1 == "N").map(|x| x.0))
        .collect();
    qrs.sort_unstable();
    let mut beats = vec![];
    let mut cluster: Vec<i64> = vec![];
    for v in qrs {
        if cluster.last().is_some_and(|&l| v - l > (0.1 * fs) as i64) {
            beats.push(cluster[cluster.len() / 2] as usize);
            cluster.clear();
        }
        cluster.push(v);
    }
    if !cluster.is_empty() {
        beats.push(cluster[cluster.len() / 2] as usize);
    }
    let lead_refs: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let d = delineate(&lead_refs, fs, &beats, cfg);
    let tol = (0.150 * fs) as i64;
    let mut t = Table::new();
    for (li, ann) in anns.iter().enumerate() {
        if ann.is_empty() {
            continue;
        }
        let (s0, s1) = (ann[0].0, ann[ann.len() - 1].0);
        let refs = waves(ann);
        let ours = &d.per_lead[li];
        let kinds: [(char, &str, Getter, Getter, Getter); 3] = [
            ('N', "qrs", |b| b.qrs_peak, |b| b.qrs_on, |b| b.qrs_end),
            ('t', "t", |b| b.t_peak.or(b.t_end), |b| b.t_on, |b| b.t_end),
            ('p', "p", |b| b.p_peak, |b| b.p_on, |b| b.p_end),
        ];
        for (kind, name, peak, on, end) in kinds {
            let det: Vec<(usize, i64)> = ours
                .iter()
                .enumerate()
                .filter_map(|(i, b)| peak(b).map(|m| (i, m.sample as i64)))
                .filter(|x| x.1 >= s0 && x.1 <= s1)
                .collect();
            let mut used = vec![false; det.len()];
            let mut tp = 0;
            for w in refs.iter().filter(|w| w.kind == kind) {
                let best = det
                    .iter()
                    .enumerate()
                    .filter(|(j, x)| !used[*j] && (x.1 - w.peak).abs() <= tol)
                    .min_by_key(|(_, x)| (x.1 - w.peak).abs());
                let sens = t.entry(format!("{name}_sens")).or_default();
                sens.n_ref += 1;
                let Some((j, x)) = best else { continue };
                used[j] = true;
                tp += 1;
                sens.n_found += 1;
                let b = &ours[x.0];
                if let Some(o) = w.on {
                    t.entry(format!("{name}_on"))
                        .or_default()
                        .add(on(b).map(|m| m.sample), o, fs);
                }
                if kind != 't' {
                    t.entry(format!("{name}_peak")).or_default().add(
                        peak(b).map(|m| m.sample),
                        w.peak,
                        fs,
                    );
                } else {
                    t.entry("t_peak".into()).or_default().add(
                        b.t_peak.map(|m| m.sample),
                        w.peak,
                        fs,
                    );
                }
                if let Some(e) = w.end {
                    t.entry(format!("{name}_end")).or_default().add(
                        end(b).map(|m| m.sample),
                        e,
                        fs,
                    );
                    if kind == 't' {
                        t.entry("t_end_wavelet".into()).or_default().add(
                            b.t_end_wavelet.map(|m| m.sample),
                            e,
                            fs,
                        );
                        t.entry("t_end_tangent".into()).or_default().add(
                            b.t_end_tangent.map(|m| m.sample),
                            e,
                            fs,
                        );
                        t.entry("t_end_area".into()).or_default().add(
                            b.t_end_area.map(|m| m.sample),
                            e,
                            fs,
                        );
                    }
                }
            }
            let ppv = t.entry(format!("{name}_ppv")).or_default();
            ppv.n_ref += det.len();
            ppv.n_found += tp;
        }
    }
    t
}

