//! FLAC-compressed WFDB signal files (signal formats 508, 516, 524).
//!
//! A WFDB record may store its signal files as FLAC (lossless audio) streams
//! instead of raw samples; this module turns such a file into the digital
//! samples of the signals stored in it, so that the rest of the WFDB reader
//! (checksums, initial values, invalid samples, physical units) treats them
//! like any other format.
//!
//! Layout, as the `wfdb` Python package 4.3 reads it (MIT-LCP/wfdb-python,
//! `wfdb/io/_signal.py`, `_rd_compressed_file` and `_rd_dat_signals`), which is
//! the reference this reader is checked against:
//! - the file is one FLAC stream starting with `fLaC` at byte 0;
//! - its channels are the signals stored in the file, in header order, so the
//!   stream has exactly as many channels as the header has signals in the file;
//! - channel `j` carries signal `j`'s samples in order: with `k` samples per
//!   frame, WFDB frame `f` of that signal is channel samples `f·k .. f·k + k`;
//!   all signals of one file must have the same samples per frame;
//! - the stream's bits per sample (8, 16 or 24) may not exceed the format's
//!   width (8 for 508, 16 for 516, 24 for 524); samples are the stream's own
//!   values, not rescaled to the format's width;
//! - the header's byte offset (`+N`) counts FLAC samples per channel, not bytes:
//!   sample 0 of the record is sample `N` of each channel;
//! - the invalid-sample value is the most negative value of the format's width
//!   (see [`super::invalid_value`]).
//!
//! Rejected, because the `wfdb` package cannot read them either (its reader
//! fails on them), so there is no reference to agree with:
//! - skew on a signal of a FLAC file (`wfdb` 4.3 raises a `KeyError`);
//! - signals of one FLAC file with different samples per frame;
//! - a FLAC record header without a length (`wfdb` infers lengths from the
//!   file size, which says nothing for compressed data);
//! - streams of other than 8, 16 or 24 bits per sample (libsndfile, which
//!   `wfdb` uses, offers no other FLAC sample types).
//!
//! Decoding is done by the `claxon` crate, which checks each FLAC frame's
//! header CRC-8 and frame CRC-16, so a damaged file fails with an error naming
//! it rather than yielding altered samples. The stream's MD5 signature is not
//! checked (that needs the whole stream decoded even when the header asks for
//! less of it). `claxon` does not implement escape-coded (unencoded) residual
//! partitions, legal FLAC that libFLAC's encoder does not write by default; a
//! stream using them is rejected as unsupported, naming the file.

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

use super::{invalid, io, unsupported};
use crate::FormatError;

/// Whether `format` is one of the FLAC-compressed signal formats.
pub fn is_flac(format: u32) -> bool {
    matches!(format, 508 | 516 | 524)
}

/// Bit width of a FLAC signal format (`format - 500`: 8, 16, 24).
fn width_of(format: u32) -> u32 {
    format - 500
}

/// What a FLAC signal file must hold, from the record header.
pub(super) struct FlacLayout<'a> {
    /// The record header (named in errors that are about the header).
    pub header_path: &'a Path,
    pub format: u32,
    /// Samples per frame of each signal in the file, in header order.
    pub spf: Vec<u32>,
    /// Skew of each signal in the file, in header order.
    pub skew: Vec<u32>,
    /// The header's `+N` field: FLAC samples per channel to skip.
    pub sample_offset: u64,
}

/// Checks of the header alone, before the file is opened: the variants that the
/// `wfdb` package does not read (module docs). `at(k, message)` names the header
/// line of the file's `k`-th signal.
pub(super) fn check_layout(
    lay: &FlacLayout,
    file_name: &str,
    at: impl Fn(usize, String) -> String,
) -> Result<(), FormatError> {
    if let Some(k) = lay.skew.iter().position(|&s| s != 0) {
        return Err(unsupported(
            lay.header_path,
            at(
                k,
                format!(
                    "skew on a signal of the FLAC-compressed file `{file_name}` is not supported \
                 (the wfdb Python package cannot read it either)"
                ),
            ),
        ));
    }
    if let Some(k) = lay.spf.iter().position(|&k| k != lay.spf[0]) {
        return Err(unsupported(
            lay.header_path,
            at(
                k,
                format!(
                    "the signals of the FLAC-compressed file `{file_name}` have different samples \
                 per frame ({:?}); a FLAC file's channels must all have the same (as the wfdb \
                 Python package requires)",
                    lay.spf
                ),
            ),
        ));
    }
    Ok(())
}

/// Decode the signals of the FLAC file `f` (at `fpath`): `n_frames` frames
/// after the sample offset, one vector per signal in header order, each of
/// `n_frames × spf` samples.
pub(super) fn read_signals(
    fpath: &Path,
    mut f: File,
    lay: &FlacLayout,
    n_frames: u64,
) -> Result<Vec<Vec<i32>>, FormatError> {
    let n_sig = lay.spf.len();
    let spf = lay.spf.first().copied().unwrap_or(1) as u64;
    let need = n_frames.checked_mul(spf).ok_or_else(|| {
        invalid(
            lay.header_path,
            format!("sample count {n_frames} × {spf} overflows"),
        )
    })?;
    let bad = |m: String| invalid(fpath, m);
    // Checked here rather than left to the decoder so that the message says
    // what the file is instead of a decoder's parse error.
    let mut magic = [0u8; 4];
    let got = read_up_to(&mut f, &mut magic).map_err(|e| io(fpath, e))?;
    if magic[..got] != *b"fLaC" {
        return Err(bad(format!(
            "not a FLAC stream (no `fLaC` signature at byte 0), but the header ({}) gives it \
             format {}",
            lay.header_path.display(),
            lay.format
        )));
    }
    f.seek(SeekFrom::Start(0)).map_err(|e| io(fpath, e))?;
    let mut reader = claxon::FlacReader::new(f).map_err(|e| match e {
        claxon::Error::IoError(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => {
            bad("truncated FLAC stream: the file ends inside its metadata".into())
        }
        claxon::Error::IoError(e) => io(fpath, e),
        claxon::Error::Unsupported(what) => decoder_lacks(fpath, 0, what),
        e => bad(format!("damaged FLAC stream metadata: {e}")),
    })?;
    let info = reader.streaminfo();
    if info.channels as usize != n_sig {
        return Err(bad(format!(
            "the FLAC stream has {} channels, but the header ({}) stores {n_sig} signals in this \
             file (one channel per signal)",
            info.channels,
            lay.header_path.display()
        )));
    }
    let width = width_of(lay.format);
    if !matches!(info.bits_per_sample, 8 | 16 | 24) {
        return Err(unsupported(
            fpath,
            format!(
                "FLAC stream of {} bits per sample; only 8, 16 and 24 are read (as by the wfdb \
                 Python package)",
                info.bits_per_sample
            ),
        ));
    }
    if info.bits_per_sample > width {
        return Err(bad(format!(
            "the FLAC stream has {} bits per sample, more than the {width} of format {} that \
             the header ({}) gives it",
            info.bits_per_sample,
            lay.format,
            lay.header_path.display()
        )));
    }
    // Decoded values outside the stream's own range can only come from a
    // damaged stream that still passed the CRCs; reject rather than pass them on.
    let lo = -(1i64 << (info.bits_per_sample - 1));
    let hi = (1i64 << (info.bits_per_sample - 1)) - 1;

    // Grow with the data rather than trusting the header's (or the stream
    // info's) count for the allocation: both may be damaged or huge.
    let reserve = need.min(1 << 22) as usize;
    let mut outs: Vec<Vec<i32>> = (0..n_sig).map(|_| Vec::with_capacity(reserve)).collect();
    let mut to_skip = lay.sample_offset;
    let mut decoded: u64 = 0; // samples per channel decoded so far, offset included
    let mut have: u64 = 0;
    let mut buf = Vec::new();
    let mut blocks = reader.blocks();
    while have < need {
        let block = match blocks.read_next_or_eof(buf) {
            Ok(Some(b)) => b,
            Ok(None) => break,
            Err(claxon::Error::IoError(e)) if e.kind() == std::io::ErrorKind::UnexpectedEof => {
                return Err(bad(format!(
                    "truncated FLAC stream: the file ends inside a FLAC frame after {decoded} \
                     samples per channel"
                )))
            }
            Err(claxon::Error::IoError(e)) => return Err(io(fpath, e)),
            Err(claxon::Error::Unsupported(what)) => {
                return Err(decoder_lacks(fpath, decoded, what));
            }
            Err(e) => {
                return Err(bad(format!(
                    "damaged FLAC stream after {decoded} samples per channel: {e}"
                )))
            }
        };
        if block.channels() as usize != n_sig {
            return Err(bad(format!(
                "damaged FLAC stream: a FLAC frame at sample {decoded} has {} channels, the \
                 stream info says {n_sig}",
                block.channels()
            )));
        }
        let dur = block.duration() as u64;
        decoded += dur;
        let from = to_skip.min(dur);
        to_skip -= from;
        let take = (dur - from).min(need - have);
        let (a, b) = (from as usize, (from + take) as usize);
        for (ch, out) in outs.iter_mut().enumerate() {
            let s = &block.channel(ch as u32)[a..b];
            if let Some(v) = s.iter().find(|&&v| (v as i64) < lo || (v as i64) > hi) {
                return Err(bad(format!(
                    "damaged FLAC stream: channel {ch} has the value {v} near sample {}, outside \
                     the range of its {} bits per sample",
                    decoded - dur,
                    info.bits_per_sample
                )));
            }
            out.extend_from_slice(s);
        }
        have += take;
        buf = block.into_buffer();
    }
    if have < need {
        let held = decoded.saturating_sub(lay.sample_offset);
        return Err(bad(format!(
            "truncated: the header ({}) says {n_frames} frames of {spf} samples per signal \
             ({need} samples per channel) after sample offset {}, but the FLAC stream holds \
             {held} after it",
            lay.header_path.display(),
            lay.sample_offset
        )));
    }
    Ok(outs)
}

/// The decoder met a FLAC feature it does not implement (notably escape-coded
/// residual partitions, which libFLAC's encoder does not write by default).
/// Damage can look the same, so the message offers both readings.
fn decoder_lacks(fpath: &Path, decoded: u64, what: &str) -> FormatError {
    unsupported(
        fpath,
        format!(
            "the FLAC stream, after {decoded} samples per channel, uses a FLAC feature that \
             this reader's decoder (claxon) does not implement, or is damaged: {what}"
        ),
    )
}

/// Read until `buf` is full or the input ends; the number of bytes read.
fn read_up_to(r: &mut impl Read, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match r.read(&mut buf[n..]) {
            Ok(0) => break,
            Ok(k) => n += k,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    Ok(n)
}
