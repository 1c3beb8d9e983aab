//! Which signals of a record are ECG leads.
//!
//! Bedside and sleep recordings store ECG beside other signals (arterial
//! pressure, plethysmogram, respiration, EEG) in one WFDB or EDF record. Those
//! signals have beat-like waves of their own; analysed as leads they would pull
//! QRS detection off the ECG and could even supply the "longest" QT. The rule
//! here is by name first, then by units (both as the input states them):
//! 1. a name of a known non-ECG signal (`ABP`, `PLETH`, `RESP`, `SpO2`, `EEG`…)
//!    → not ECG;
//! 2. a name of an ECG lead (`I`…`V6`, `MLII`, `MCL1`, `CM5`, anything with
//!    `ECG` or `EKG` in it) → ECG, whatever the units;
//! 3. otherwise units that are not a voltage (`mmHg`, `NU`, `%`…) → not ECG;
//!    a voltage or no units → ECG (a bare CSV column is taken as a lead).
//!
//! The name lists are common practice in PhysioNet and EDF recordings.

/// Names (upper case, before any space, digit suffix allowed) of signals that
/// are not ECG.
const NON_ECG_PREFIXES: [&str; 31] = [
    // `EDF`: the annotation channel `EDF Annotations` kept as a signal when an
    // EDF+ file is converted to WFDB.
    "EDF", "ABP", "ART", "AO", "PAP", "CVP", "ICP", "LAP", "RAP", "UAP", "NBP", "BP", "PLETH",
    "PPG", "RESP", "SPO2", "SAO2", "SPO₂", "CO2", "ETCO2", "PULSE", "EEG", "EOG", "EMG", "FLOW",
    "AIRFLOW", "THOR", "ABDO", "NASAL", "TEMP", "SNORE",
];

/// ECG lead names (upper case).
const ECG_LEADS: [&str; 28] = [
    "I", "II", "III", "AVR", "AVL", "AVF", "-AVR", "V", "V1", "V2", "V3", "V4", "V5", "V6", "V7",
    "V8", "V9", "V3R", "V4R", "MLI", "MLII", "MLIII", "MCL1", "MCL6", "CM5", "X", "Y", "Z",
];

/// Whether `name` names an ECG lead (rule 2 of the module docs).
pub fn is_ecg_name(name: &str) -> bool {
    let u = name.trim().to_uppercase();
    u.contains("ECG") || u.contains("EKG") || ECG_LEADS.contains(&u.as_str())
}

/// Whether `name` names a signal that is not ECG (rule 1): the name, or its
/// first word, is one of the known non-ECG signals, possibly with a number
/// (`ABP2`, `EEG Fpz-Cz`).
pub fn is_non_ecg_name(name: &str) -> bool {
    let u = name.trim().to_uppercase();
    let word = u
        .split(|c: char| c.is_whitespace() || c == '-' || c == '_' || c == ':')
        .next()
        .unwrap_or("");
    let stem = word.trim_end_matches(|c: char| c.is_ascii_digit());
    NON_ECG_PREFIXES.contains(&stem) || NON_ECG_PREFIXES.contains(&word)
}

/// Whether `units` is a voltage (or empty: not stated).
pub fn is_voltage_unit(units: &str) -> bool {
    matches!(
        units.trim().to_lowercase().as_str(),
        "" | "mv" | "uv" | "µv" | "μv" | "v" | "nv"
    )
}

/// Why a signal is not analysed as an ECG lead, or `None` if it is one.
pub fn non_ecg_reason(name: &str, units: &str) -> Option<String> {
    if is_non_ecg_name(name) {
        return Some(format!("`{name}` is the name of a non-ECG signal"));
    }
    if is_ecg_name(name) {
        return None;
    }
    if !is_voltage_unit(units) {
        return Some(format!("`{name}` is in `{units}`, not a voltage"));
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn physionet_signal_names_and_units() {
        // Signal descriptions and units as they appear in PhysioNet headers
        // (MIMIC and the 2015 challenge records in the WFDB conformance set).
        for (name, units) in [
            ("ABP", "mmHg"),
            ("PLETH", "NU"),
            ("RESP", "NU"),
            ("RESP", "mV"),
        ] {
            assert!(non_ecg_reason(name, units).is_some(), "{name} {units}");
        }
        for (name, units) in [
            ("II", "mV"),
            ("V", "mV"),
            ("MLII", "mV"),
            ("MCL1", "mV"),
            ("ECG_2", "mV"),
            ("V5", "uV"),
            ("col 0", ""),
            ("lead", "mV"),
            ("II", "NU"),
        ] {
            assert!(non_ecg_reason(name, units).is_none(), "{name} {units}");
        }
        assert!(non_ecg_reason("EEG Fpz-Cz", "uV").is_some());
        assert!(non_ecg_reason("SpO2", "%").is_some());
        assert!(non_ecg_reason("ABP2", "mmHg").is_some());
        assert!(non_ecg_reason("Pressure", "mmHg").is_some());
        // `V` alone is the MIMIC name of a precordial lead, not a unit.
        assert!(!is_non_ecg_name("V"));
    }
}
