//! A copy of the demo run fixture in a temporary directory, with the input paths
//! made absolute so the rhythm strips can be read.

#![allow(dead_code)]

use std::path::{Path, PathBuf};

pub const FIXTURE: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/demo-run");
pub const REPO: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/../..");

pub fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let p = e.path();
        if p.is_dir() {
            copy_dir(&p, &to.join(e.file_name()));
        } else {
            std::fs::copy(&p, to.join(e.file_name())).unwrap();
        }
    }
}

/// A fresh run directory (`<tmp>/run`).
pub fn run_dir(tmp: &Path) -> PathBuf {
    let run = tmp.join("run");
    copy_dir(Path::new(FIXTURE), &run);
    let path = run.join("run.json");
    let mut j: serde_json::Value = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    for r in j["records"].as_array_mut().unwrap() {
        let p = r["path"].as_str().unwrap().to_string();
        let abs = Path::new(REPO).join(p).canonicalize().unwrap();
        r["path"] = serde_json::Value::String(abs.display().to_string());
    }
    std::fs::write(&path, serde_json::to_vec_pretty(&j).unwrap()).unwrap();
    run
}

pub fn load_part(run: &Path, record: &str) -> tendline_store::Part {
    tendline_store::Part::load(&run.join("parts").join(format!("{record}.json")))
        .unwrap()
        .unwrap()
}
