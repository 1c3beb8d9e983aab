//! Development tool for cross-checking the filters with reference libraries:
//! prints a design, its frequency response or a filtered signal as JSON on
//! standard output. Signals are read from standard input as whitespace- or
//! comma-separated numbers.
//!
//! ```text
//! dsp-dump design   kind=lowpass|highpass|bandpass|notch order=N fc=HZ | lo=HZ hi=HZ | f0=HZ q=Q fs=HZ [npoints=512]
//! dsp-dump lfilter  <design keys>            < signal
//! dsp-dump filtfilt <design keys> [padlen=N] < signal
//! dsp-dump condition fs=HZ [config=JSON]     < signal   (one lead)
//! dsp-dump detect    fs=HZ [config=JSON]     < signal
//! dsp-dump resample  fs_in=HZ fs_out=HZ      < signal
//! dsp-dump resample_poly up=N down=N         < signal
//! ```
//!
//! `design` reports `sos` rows as `[b0, b1, b2, 1, a1, a2]` (the layout of
//! `scipy.signal` second-order sections) and the response `h_re`, `h_im` at
//! `freqs_hz = k · fs / (2·npoints)`, k = 0..npoints (the grid of
//! `scipy.signal.sosfreqz(sos, worN=npoints, fs=fs)`).

use std::collections::HashMap;
use std::io::Read;
use std::process::ExitCode;

use serde_json::{json, Value};
use tendline_dsp::filter::{
    butterworth_bandpass_sos, butterworth_highpass_sos, butterworth_lowpass_sos, filtfilt_sos,
    filtfilt_sos_padded, lfilter_sos, notch_sos, sos_response, ConditioningFilter, FilterConfig,
    Sos,
};
use tendline_dsp::resample::{resample, resample_poly};

fn main() -> ExitCode {
    match run() {
        Ok(v) => {
            println!("{v}");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("dsp-dump: {e}");
            ExitCode::from(2)
        }
    }
}

struct Args(HashMap<String, String>);

impl Args {
    fn str(&self, key: &str) -> Result<&str, String> {
        self.0
            .get(key)
            .map(String::as_str)
            .ok_or_else(|| format!("missing argument `{key}=...`"))
    }
    fn f64(&self, key: &str) -> Result<f64, String> {
        let s = self.str(key)?;
        s.parse()
            .map_err(|_| format!("argument `{key}`: `{s}` is not a number"))
    }
    fn usize(&self, key: &str) -> Result<usize, String> {
        let s = self.str(key)?;
        s.parse()
            .map_err(|_| format!("argument `{key}`: `{s}` is not a non-negative integer"))
    }
    fn config(&self) -> Result<FilterConfig, String> {
        match self.0.get("config") {
            None => Ok(FilterConfig::default()),
            Some(s) => serde_json::from_str(s).map_err(|e| format!("argument `config`: {e}")),
        }
    }
}

fn read_signal() -> Result<Vec<f64>, String> {
    let mut s = String::new();
    std::io::stdin()
        .read_to_string(&mut s)
        .map_err(|e| format!("reading standard input: {e}"))?;
    s.split(|c: char| c.is_whitespace() || c == ',')
        .filter(|t| !t.is_empty())
        .map(|t| {
            t.parse::<f64>()
                .map_err(|_| format!("standard input: `{t}` is not a number"))
        })
        .collect()
}

fn design(a: &Args) -> Result<Vec<Sos>, String> {
    let fs = a.f64("fs")?;
    let r = match a.str("kind")? {
        "lowpass" => butterworth_lowpass_sos(a.usize("order")?, a.f64("fc")?, fs),
        "highpass" => butterworth_highpass_sos(a.usize("order")?, a.f64("fc")?, fs),
        "bandpass" => butterworth_bandpass_sos(a.usize("order")?, a.f64("lo")?, a.f64("hi")?, fs),
        "notch" => notch_sos(a.f64("f0")?, a.f64("q")?, fs).map(|s| vec![s]),
        other => {
            return Err(format!(
                "unknown kind `{other}`: expected lowpass, highpass, bandpass or notch"
            ))
        }
    };
    r.map_err(|e| e.to_string())
}

fn sos_json(sections: &[Sos]) -> Value {
    json!(sections
        .iter()
        .map(|s| vec![s.b0, s.b1, s.b2, 1.0, s.a1, s.a2])
        .collect::<Vec<_>>())
}

fn run() -> Result<Value, String> {
    let mut argv = std::env::args().skip(1);
    let cmd = argv.next().ok_or(
        "missing command (design, lfilter, filtfilt, condition, detect, resample, resample_poly)",
    )?;
    let mut map = HashMap::new();
    for arg in argv {
        let (k, v) = arg
            .split_once('=')
            .ok_or_else(|| format!("argument `{arg}` is not of the form key=value"))?;
        map.insert(k.to_string(), v.to_string());
    }
    let a = Args(map);
    match cmd.as_str() {
        "design" => {
            let sos = design(&a)?;
            let fs = a.f64("fs")?;
            let npoints =
                a.0.get("npoints")
                    .map(|_| a.usize("npoints"))
                    .transpose()?
                    .unwrap_or(512);
            let freqs: Vec<f64> = (0..npoints)
                .map(|k| k as f64 * fs / (2.0 * npoints as f64))
                .collect();
            let h: Vec<_> = freqs.iter().map(|&f| sos_response(&sos, f, fs)).collect();
            Ok(json!({
                "sos": sos_json(&sos),
                "freqs_hz": freqs,
                "h_re": h.iter().map(|c| c.re).collect::<Vec<_>>(),
                "h_im": h.iter().map(|c| c.im).collect::<Vec<_>>(),
            }))
        }
        "lfilter" => {
            let sos = design(&a)?;
            Ok(json!({ "y": lfilter_sos(&sos, &read_signal()?) }))
        }
        "filtfilt" => {
            let sos = design(&a)?;
            let x = read_signal()?;
            let y = match a.0.get("padlen") {
                Some(_) => filtfilt_sos_padded(&sos, &x, a.usize("padlen")?),
                None => filtfilt_sos(&sos, &x),
            };
            Ok(json!({ "y": y }))
        }
        "condition" => {
            let cfg = a.config()?;
            let fs = a.f64("fs")?;
            let f = ConditioningFilter::design(fs, &cfg).map_err(|e| e.to_string())?;
            let x = read_signal()?;
            let (y, notch) = f.apply_record(&[&x]);
            Ok(json!({
                "notch_hz": notch,
                "sos": sos_json(&f.sections(notch)),
                "padlen": f.padlen(notch, x.len()),
                "lowpass_hz": f.lowpass_hz(),
                "y": y[0],
            }))
        }
        "detect" => {
            let cfg = a.config()?;
            let x = read_signal()?;
            Ok(json!({ "notch_hz": ConditioningFilter::detect_powerline(&x, a.f64("fs")?, &cfg) }))
        }
        "resample" => {
            let x = read_signal()?;
            let y = resample(&x, a.f64("fs_in")?, a.f64("fs_out")?).map_err(|e| e.to_string())?;
            Ok(json!({ "y": y }))
        }
        "resample_poly" => {
            let x = read_signal()?;
            let y = resample_poly(&x, a.usize("up")? as u64, a.usize("down")? as u64)
                .map_err(|e| e.to_string())?;
            Ok(json!({ "y": y }))
        }
        other => Err(format!("unknown command `{other}`")),
    }
}
