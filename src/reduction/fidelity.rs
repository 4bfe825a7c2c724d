//! How faithfully a reduced circuit reproduces the full model's response in the analysis
//! window: the fraction of variance explained, and the errors of the peak's amplitude and time.

use serde::Serialize;

/// What the search must keep at or above the target.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Criterion {
    /// Fraction of variance explained of the full response.
    Fve,
    /// One minus the relative error of the peak response (deviation from the gray response).
    Peak,
}

impl Criterion {
    /// Parse `fve` or `peak`.
    pub fn parse(s: &str) -> Option<Criterion> {
        match s {
            "fve" => Some(Criterion::Fve),
            "peak" => Some(Criterion::Peak),
            _ => None,
        }
    }

    /// The score of `f` this criterion compares with the target.
    pub fn score(self, f: &Fidelity) -> f64 {
        match self {
            Criterion::Fve => f.fve,
            Criterion::Peak => 1.0 - f.peak_amplitude_error,
        }
    }
}

/// Fidelity of one reduced response.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Fidelity {
    /// 1 - SSE / total variance of the full response in the window (1 = identical; can be < 0).
    pub fve: f64,
    /// |peak_reduced - peak_full| / |peak_full|, peaks measured from the gray response and
    /// taken with their sign at the largest deviation.
    pub peak_amplitude_error: f64,
    /// Reduced peak frame minus full peak frame.
    pub peak_timing_error_frames: i64,
}

/// The signed largest deviation of `r` from `rest`, and where it is.
fn peak(r: &[f64], rest: f64) -> (f64, usize) {
    r.iter()
        .enumerate()
        .fold((0.0, 0), |(best, at), (i, &v)| if (v - rest).abs() > best.abs() { (v - rest, i) } else { (best, at) })
}

/// Compare `reduced` with `full` (the cell's rate at each window frame); `rest` is the full
/// model's rate under the gray stimulus.
pub fn fidelity(full: &[f64], reduced: &[f64], rest: f64) -> Fidelity {
    let n = full.len().max(1) as f64;
    let mean = full.iter().sum::<f64>() / n;
    let var: f64 = full.iter().map(|v| (v - mean).powi(2)).sum();
    let sse: f64 = full.iter().zip(reduced).map(|(a, b)| (a - b).powi(2)).sum();
    let fve = if var > 0.0 {
        1.0 - sse / var
    } else if sse == 0.0 {
        1.0
    } else {
        f64::NEG_INFINITY
    };
    let (pf, tf) = peak(full, rest);
    let (pr, tr) = peak(reduced, rest);
    let peak_amplitude_error = if pf != 0.0 {
        (pr - pf).abs() / pf.abs()
    } else if pr == 0.0 {
        0.0
    } else {
        f64::INFINITY
    };
    Fidelity { fve, peak_amplitude_error, peak_timing_error_frames: tr as i64 - tf as i64 }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn identical_response_is_perfect() {
        let r = [1.0, 3.0, 2.0, 0.5];
        let f = fidelity(&r, &r, 1.0);
        assert_eq!(f, Fidelity { fve: 1.0, peak_amplitude_error: 0.0, peak_timing_error_frames: 0 });
    }

    #[test]
    fn flat_reduced_response_explains_nothing_and_halved_peak_is_half_wrong() {
        // FVE of the mean is 0 by definition (common practice).
        let full = [0.0, 2.0, 4.0, 2.0];
        let flat = [2.0; 4];
        assert!(fidelity(&full, &flat, 0.0).fve.abs() < 1e-12);
        let half = [0.0, 1.0, 2.0, 1.0];
        let f = fidelity(&full, &half, 0.0);
        assert!((f.peak_amplitude_error - 0.5).abs() < 1e-12);
        assert_eq!(f.peak_timing_error_frames, 0);
        let late = [0.0, 2.0, 2.0, 4.0];
        assert_eq!(fidelity(&full, &late, 0.0).peak_timing_error_frames, 1);
    }

    #[test]
    fn peak_is_signed_deviation_from_rest() {
        // A suppression (rate below rest) is the peak when it is the larger deviation.
        let full = [5.0, 1.0, 5.5];
        let f = fidelity(&full, &[5.0, 3.0, 5.5], 5.0);
        assert!((f.peak_amplitude_error - 0.5).abs() < 1e-12);
        assert_eq!(Criterion::Peak.score(&f), 0.5);
    }
}
