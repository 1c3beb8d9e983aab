//! Signal processing shared by the stages: conditioning filters, pacemaker
//! spike removal, an amplitude check of the input's unit, resampling and the
//! stationary wavelet transform.
//!
//! # Conventions
//!
//! * **Units.** Sampling rates and frequencies are in Hz (`fs`, `*_hz`);
//!   signals are plain `f64` slices in whatever amplitude unit the record
//!   has (filters are linear, so units pass through). Positions are sample
//!   indices; sample `i` is at time `i / fs`.
//! * **Filter sections.** IIR filters are cascades of second-order sections
//!   ([`filter::Sos`], the `biquad` crate's normalised coefficients, leading
//!   denominator coefficient 1), run in transposed direct form II.
//! * **Causal filtering** ([`filter::lfilter_sos`]) starts from rest (zero
//!   state) and delays the signal by the filter's group delay.
//! * **Zero-phase filtering** ([`filter::filtfilt_sos`]) runs the cascade
//!   forward then backward, as `scipy.signal.sosfiltfilt`: before filtering,
//!   each end is extended by `padlen` samples of its point reflection about
//!   the end sample (`2·x[0] − x[i]`, "odd" extension), and each pass starts
//!   from the step steady state scaled to the first sample it sees, so a
//!   constant or linear stretch at an edge produces no start-up transient.
//!   The default `padlen` is scipy's `3·(2·sections + 1)`; the conditioning
//!   chain uses at least one period of its high-pass cut-off
//!   ([`filter::ConditioningFilter::padlen`]). `padlen` is clipped to
//!   `len − 1` for short signals. The effective magnitude response is the
//!   cascade's squared: a Butterworth of order `n` becomes `2n`, and its
//!   cut-off is −6 dB rather than −3 dB.
//! * **Output length** always equals input length, except for resampling,
//!   where it is `round(len · fs_out / fs_in)` ([`resample::resample`]) or
//!   `ceil(len · up / down)` ([`resample::resample_poly`]).
//! * **Non-finite samples** are not screened here (the readers reject them);
//!   a NaN propagates through an IIR filter to the end of the signal.
//! * **Column medians** ([`colmedian`]) are medians in the order of
//!   `f64::total_cmp`, the mean of the two middle values for even counts.
//! * **Same bits everywhere.** Fast forms (lead pairs in one cascade, AVX
//!   copies chosen at run time, comparator networks) give the bits of the
//!   plain forms they replace, which remain as test oracles; no fused
//!   multiply-add is used.

pub mod amplitude;
pub mod colmedian;
pub mod filter;
pub mod pacing;
pub mod resample;
pub mod select;
pub mod wavelet;

pub use filter::DspError;
