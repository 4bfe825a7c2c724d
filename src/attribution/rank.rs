//! Agreement between unit rankings: Kendall's tau-b (Kendall 1945, Biometrika), which counts
//! concordant and discordant pairs and corrects for ties.

/// Kendall's tau-b between two score lists of equal length (NaN when undefined).
pub fn kendall_tau(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (mut concordant, mut discordant, mut ties_a, mut ties_b) = (0f64, 0f64, 0f64, 0f64);
    for i in 0..n {
        for j in i + 1..n {
            let (da, db) = (a[i] - a[j], b[i] - b[j]);
            if da == 0.0 && db == 0.0 {
                continue;
            } else if da == 0.0 {
                ties_a += 1.0;
            } else if db == 0.0 {
                ties_b += 1.0;
            } else if da.signum() == db.signum() {
                concordant += 1.0;
            } else {
                discordant += 1.0;
            }
        }
    }
    let denom = ((concordant + discordant + ties_a) * (concordant + discordant + ties_b)).sqrt();
    if denom == 0.0 {
        f64::NAN
    } else {
        (concordant - discordant) / denom
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tau_of_known_orders() {
        assert_eq!(kendall_tau(&[1.0, 2.0, 3.0, 4.0], &[10.0, 20.0, 30.0, 40.0]), 1.0);
        assert_eq!(kendall_tau(&[1.0, 2.0, 3.0, 4.0], &[4.0, 3.0, 2.0, 1.0]), -1.0);
        // One swapped pair of six: (5 - 1) / 6.
        assert!((kendall_tau(&[1.0, 2.0, 3.0, 4.0], &[1.0, 3.0, 2.0, 4.0]) - 4.0 / 6.0).abs() < 1e-12);
    }
}
