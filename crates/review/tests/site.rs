//! The static review site built from the demo fixture run.

mod common;

use tendline_review::build_site;

#[test]
fn index_by_priority_and_record_pages() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let out = tmp.path().join("site");
    let s = build_site(&run, &out).unwrap();
    assert!(s.warnings.is_empty(), "{:?}", s.warnings);
    assert_eq!(s.pages.len(), 2);
    // Highest score first.
    assert!(s.priorities.windows(2).all(|w| w[0].score >= w[1].score));
    let by = |r: &str| s.priorities.iter().find(|p| p.record == r).unwrap();
    // s06_base: a woman with a prolonged QTc (the demo scenario's README).
    assert!(
        by("s06_base")
            .reasons
            .iter()
            .any(|r| r.contains("QTc prolonged")),
        "{:?}",
        by("s06_base")
    );
    // s08_post: the noisy record; the run left noisy leads out of its QT.
    assert!(
        by("s08_post").reasons.iter().any(|r| r.contains("noisy")),
        "{:?}",
        by("s08_post")
    );

    let index = std::fs::read_to_string(&s.index).unwrap();
    let (a, b) = (
        index.find("s06_base.html").unwrap(),
        index.find("s08_post.html").unwrap(),
    );
    assert_eq!(a < b, s.priorities[0].record == "s06_base");
    assert!(index.contains(tendline_measure::CAUTION));

    let page = std::fs::read_to_string(out.join("s06_base.html")).unwrap();
    for needle in [
        "id=\"grid-minor\"",
        "id=\"grid-major\"",
        "Rhythm strip",
        "data-f=\"t_end\"",
        "data-f=\"qrs_on\"",
        "data-f=\"p_on\"",
        "longest lead: V2",
        ">Tp-e</th>",
        ">QTd</th>",
        "Save corrections",
        "class=\"unread\"",
        tendline_measure::CAUTION,
    ] {
        assert!(page.contains(needle), "page lacks {needle}");
    }
    // Offline: nothing is fetched from elsewhere.
    for bad in ["http://", "https://", "<link", "src="] {
        let ok = page
            .match_indices(bad)
            .all(|(i, _)| page[i..].starts_with("http://www.w3.org/2000/svg"));
        assert!(ok, "page refers to an outside resource ({bad})");
    }
}

#[test]
fn missing_input_record_only_drops_the_strip() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let p = run.join("run.json");
    let text = std::fs::read_to_string(&p)
        .unwrap()
        .replace("s08_post.hea", "gone.hea");
    std::fs::write(&p, text).unwrap();
    let s = build_site(&run, &tmp.path().join("site")).unwrap();
    assert_eq!(s.pages.len(), 2);
    assert!(
        s.warnings
            .iter()
            .any(|w| w.contains("s08_post") && w.contains("rhythm strip")),
        "{:?}",
        s.warnings
    );
}

#[test]
fn not_a_run_directory_is_a_clear_error() {
    let tmp = tempfile::tempdir().unwrap();
    let e = build_site(tmp.path(), &tmp.path().join("site")).unwrap_err();
    assert!(e.to_string().contains("run.json"), "{e}");
}

#[test]
fn page_after_an_import_shows_corrected_marks_and_audit() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let p = common::load_part(&run, "s06_base");
    let tendline_store::Data::I64(t_end) =
        &p.group.groups["windows"].groups["medians"].groups["000"].groups["marks"].datasets
            ["t_end"]
            .data
    else {
        panic!()
    };
    let old = t_end[8];
    let f = tmp.path().join("c.json");
    let doc = serde_json::json!({"format": "tendline-corrections", "version": 1, "who": "Dr Page",
        "changes": [{"record": "s06_base", "window": 0, "lead": "V3", "fiducial": "t_end",
                     "old_sample": old, "new_sample": old + 4, "reason": "late T end"}]});
    std::fs::write(&f, doc.to_string()).unwrap();
    tendline_review::apply_corrections(&run, &f, None).unwrap();
    let out = tmp.path().join("site");
    build_site(&run, &out).unwrap();
    let page = std::fs::read_to_string(out.join("s06_base.html")).unwrap();
    assert!(
        page.contains("Corrections already applied")
            && page.contains("late T end")
            && page.contains("Dr Page")
    );
    // The V3 T end is drawn at the corrected sample and remembers the automatic one.
    let needle = format!(
        "data-lead=\"V3\" data-f=\"t_end\" data-auto=\"{old}\" data-s=\"{}\"",
        old + 4
    );
    assert!(page.contains(&needle), "no {needle}");
    assert!(page.contains("class=\"mark t moved\""));
}

#[test]
fn strip_shades_unreadable_stretches_and_ticks_beats() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let path = run.join("parts/s06_base.json");
    let mut p = common::load_part(&run, "s06_base");
    let u = p.group.group("unreadable");
    u.dataset("start", tendline_store::Data::I64(vec![1000]));
    u.dataset("end", tendline_store::Data::I64(vec![2000]));
    u.dataset("reason", tendline_store::Data::Text(vec!["noise".into()]));
    p.save(&path).unwrap();
    let s = build_site(&run, &tmp.path().join("site")).unwrap();
    let pr = s
        .priorities
        .iter()
        .find(|p| p.record == "s06_base")
        .unwrap();
    assert!(
        pr.reasons.iter().any(|r| r.contains("unreadable")),
        "{:?}",
        pr.reasons
    );
    let page = std::fs::read_to_string(tmp.path().join("site/s06_base.html")).unwrap();
    // 1000 samples at 500 Hz = 2 s = 50 mm at 25 mm/s, 1000 more samples wide.
    assert!(page.contains("class=\"unreadable\" x=\"50.00\" width=\"50.00\""));
    // Every beat of the strip carries its movable global QRS onset and T end, at the
    // run's sample (x = sample / fs · 25 mm/s).
    let g = common::load_part(&run, "s06_base").group;
    let tendline_store::Data::I64(t_end) =
        &g.groups["marks"].groups["global"].datasets["t_end"].data
    else {
        panic!()
    };
    let k = t_end[0];
    let needle = format!(
        "class=\"mark bmark t\" tabindex=\"0\" data-beat=\"0\" data-lead=\"global\" data-f=\"t_end\" data-auto=\"{k}\" data-s=\"{k}\" data-fs=\"500\" transform=\"translate({:.2},0)\"",
        k as f64 / 500.0 * 25.0
    );
    assert!(page.contains(&needle), "no {needle}");
    assert!(page.contains("class=\"beat\" data-beat=\"0\""));
}
