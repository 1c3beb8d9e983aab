//! Signal processing shared by the stages: conditioning filters and the
//! stationary wavelet transform.

pub mod filter;
pub mod wavelet;
