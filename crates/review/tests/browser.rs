//! The review pages in a real headless browser (Chromium from the distribution's
//! packages): they load without JavaScript errors, the screenshot is a real image,
//! the DOM holds the ECG grid and the marks, and the page's own keyboard handling
//! produces a corrections file that `apply_corrections` accepts.
//!
//! Skipped with a message when `/usr/bin/chromium` is absent (CI installs it).

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;

const CHROMIUM: &str = "/usr/bin/chromium";

struct Out {
    stdout: String,
    stderr: String,
}

fn chromium(profile: &Path, extra: &[String], url: &str) -> Out {
    let o = Command::new(CHROMIUM)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            &format!("--user-data-dir={}", profile.display()),
            "--enable-logging=stderr",
            "--v=0",
        ])
        .args(extra)
        .arg(url)
        .output()
        .expect("run chromium");
    Out {
        stdout: String::from_utf8_lossy(&o.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&o.stderr).into_owned(),
    }
}

fn url(p: &Path) -> String {
    format!("file://{}", p.canonicalize().unwrap().display())
}

fn available() -> bool {
    if Path::new(CHROMIUM).exists() {
        true
    } else {
        println!("SKIPPED: {CHROMIUM} not found; install the distribution's chromium package to run the browser check");
        false
    }
}

/// Width and height from a PNG's IHDR chunk (PNG specification, ISO/IEC 15948).
fn png_size(b: &[u8]) -> Option<(u32, u32)> {
    (b.len() > 24 && b.starts_with(b"\x89PNG\r\n\x1a\n") && &b[12..16] == b"IHDR").then(|| {
        (
            u32::from_be_bytes(b[16..20].try_into().unwrap()),
            u32::from_be_bytes(b[20..24].try_into().unwrap()),
        )
    })
}

#[test]
fn the_console_check_catches_a_script_error() {
    // The "no Uncaught" check below can fail: a page with a thrown error shows it.
    if !available() {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let page = tmp.path().join("err.html");
    std::fs::write(
        &page,
        "<html><body><script>throw new Error('deliberate')</script></body></html>",
    )
    .unwrap();
    let o = chromium(
        &tmp.path().join("profile"),
        &["--dump-dom".into()],
        &url(&page),
    );
    assert!(
        o.stderr.contains("Uncaught Error: deliberate"),
        "{}",
        o.stderr
    );
}

#[test]
fn pages_render_without_errors_and_show_grid_and_marks() {
    if !available() {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let site = tmp.path().join("site");
    let s = tendline_review::build_site(&run, &site).unwrap();
    let mut pages: Vec<PathBuf> = s.pages.clone();
    pages.push(s.index.clone());
    for page in &pages {
        let profile = tmp.path().join("profile");
        let shot = tmp.path().join("shot.png");
        let _ = std::fs::remove_file(&shot);
        let o = chromium(
            &profile,
            &[
                format!("--screenshot={}", shot.display()),
                "--window-size=1400,1000".into(),
            ],
            &url(page),
        );
        assert!(
            !o.stderr.contains("Uncaught"),
            "{}: {}",
            page.display(),
            o.stderr
        );
        let png = std::fs::read(&shot)
            .unwrap_or_else(|e| panic!("{}: no screenshot ({e}): {}", page.display(), o.stderr));
        assert_eq!(png_size(&png), Some((1400, 1000)), "{}", page.display());
        // A blank 1400×1000 PNG compresses to a few kB; the grid and traces do not.
        assert!(
            png.len() > 30_000,
            "{}: screenshot only {} bytes",
            page.display(),
            png.len()
        );
        if std::env::var_os("REVIEW_KEEP_SHOT").is_some() {
            let keep = std::env::temp_dir().join(format!(
                "review-{}.png",
                page.file_stem().unwrap().to_string_lossy()
            ));
            std::fs::copy(&shot, &keep).unwrap();
            println!("screenshot kept: {}", keep.display());
        }

        let o = chromium(&profile, &["--dump-dom".into()], &url(page));
        assert!(
            !o.stderr.contains("Uncaught"),
            "{}: {}",
            page.display(),
            o.stderr
        );
        if page == &s.index {
            assert!(o.stdout.contains("id=\"records\""));
            continue;
        }
        // The script ran to its end.
        assert!(
            o.stdout.contains("data-ready=\"1\""),
            "{}: script did not finish",
            page.display()
        );
        assert!(o.stdout.contains("id=\"grid-minor\"") && o.stdout.contains("url(#grid-major)"));
        assert!(o.stdout.contains("class=\"mark t\"") && o.stdout.contains("data-f=\"t_end\""));
        assert!(o.stdout.contains("class=\"mark q\"") && o.stdout.contains("class=\"mark p\""));
    }
}

#[test]
fn keyboard_correction_in_the_browser_round_trips_through_apply() {
    if !available() {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let site = tmp.path().join("site");
    tendline_review::build_site(&run, &site).unwrap();
    let page = site.join("s06_base.html");
    let o = chromium(
        &tmp.path().join("profile"),
        &["--dump-dom".into()],
        &format!("{}#selftest", url(&page)),
    );
    assert!(!o.stderr.contains("Uncaught"), "{}", o.stderr);
    let start = o
        .stdout
        .find("<pre id=\"selftest\">")
        .expect("self-test output")
        + "<pre id=\"selftest\">".len();
    let end = start + o.stdout[start..].find("</pre>").unwrap();
    let json = o.stdout[start..end]
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&amp;", "&");
    let doc: serde_json::Value = serde_json::from_str(&json).unwrap();
    let ch = &doc["changes"][0];
    // The first T end on the page is lead I of window 0; ten presses of → move it 10 samples.
    assert_eq!(ch["lead"], "I");
    assert_eq!(ch["fiducial"], "t_end");
    assert_eq!(
        ch["new_sample"].as_i64().unwrap() - ch["old_sample"].as_i64().unwrap(),
        10
    );
    // The QRS onset of lead II was dragged 2 mm: 80 ms at 25 mm/s, 40 samples at 500 Hz.
    let drag = &doc["changes"][1];
    assert_eq!(
        (drag["lead"].as_str(), drag["fiducial"].as_str()),
        (Some("II"), Some("qrs_on"))
    );
    assert_eq!(
        drag["new_sample"].as_i64().unwrap() - drag["old_sample"].as_i64().unwrap(),
        40
    );
    assert_eq!(doc["who"], "browser self-test");
    // In the strip: the first beat's T end moved 5 samples left with ←; the QRS onset
    // moved and put back with Backspace leaves no entry; beat 1 marked unreadable (U).
    let beats: Vec<&serde_json::Value> = doc["changes"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|c| c["kind"].as_str().unwrap().starts_with("beat"))
        .collect();
    assert_eq!(beats.len(), 2, "{json}");
    assert_eq!(
        (beats[0]["kind"].as_str(), beats[0]["fiducial"].as_str()),
        (Some("beat_mark"), Some("t_end"))
    );
    assert_eq!(
        beats[0]["new_sample"].as_i64().unwrap() - beats[0]["old_sample"].as_i64().unwrap(),
        -5
    );
    assert_eq!(beats[1]["kind"], "beat_unreadable");
    assert_eq!(beats[1]["beat"], 1);
    let n = doc["changes"].as_array().unwrap().len();
    // The CSV the other save button writes holds the same entries.
    let cs = o
        .stdout
        .find("<pre id=\"selftest-csv\">")
        .expect("CSV self-test output")
        + "<pre id=\"selftest-csv\">".len();
    let ce = cs + o.stdout[cs..].find("</pre>").unwrap();
    let csv = o.stdout[cs..ce].replace("&amp;", "&");
    let fc = tmp.path().join("from-browser.csv");
    std::fs::write(&fc, &csv).unwrap();
    assert_eq!(csv.lines().count(), n + 1, "{csv}");

    let f = tmp.path().join("from-browser.json");
    std::fs::write(&f, &json).unwrap();
    // Applying the CSV to a copy of the run gives the same parts as the JSON.
    let run2 = tmp.path().join("run-csv");
    common::copy_dir(&run, &run2);
    let rep2 = tendline_review::apply_corrections(&run2, &fc, None).unwrap();
    assert_eq!(rep2.n_changes, n);
    let rep = tendline_review::apply_corrections(&run, &f, None).unwrap();
    assert_eq!(rep.n_changes, n);
    assert_eq!(
        std::fs::read(run.join("annotations/s06_base.mark")).unwrap(),
        std::fs::read(run2.join("annotations/s06_base.mark")).unwrap()
    );
    let g = common::load_part(&run, "s06_base").group;
    let tendline_store::Data::F64(q) =
        &g.groups["windows"].groups["medians"].groups["000"].groups["corrected"].datasets["qt_ms"]
            .data
    else {
        panic!()
    };
    let tendline_store::Data::F64(q0) =
        &g.groups["windows"].groups["medians"].groups["000"].datasets["qt_ms"].data
    else {
        panic!()
    };
    // 10 samples at 500 Hz = 20 ms.
    assert!((q[0] - q0[0] - 20.0).abs() < 1e-9, "{} vs {}", q[0], q0[0]);
}
