//! The Thomas algorithm: the O(N) direct solve of the tridiagonal Newton
//! system (each residual involves a node and its two neighbours).

/// Solve a tridiagonal system by the Thomas algorithm (no pivoting).
///
/// Row `i` reads `lower[i]·x[i−1] + diag[i]·x[i] + upper[i]·x[i+1] =
/// rhs[i]` (`lower[0]` and `upper[n−1]` are ignored). The solution
/// overwrites `rhs`; `work` is scratch of the same length. Returns the row
/// of a zero or non-finite pivot on failure. Without pivoting it is exact for
/// the diagonally dominant systems the θ-scheme produces at small steps and
/// in practice for larger ones; a failed pivot makes the caller halve the
/// step, which restores dominance through the storage term.
pub(super) fn solve_tridiagonal(
    lower: &[f64],
    diag: &[f64],
    upper: &[f64],
    rhs: &mut [f64],
    work: &mut [f64],
) -> Result<(), usize> {
    let n = rhs.len();
    if n == 0 {
        return Ok(());
    }
    let mut beta = diag[0];
    if beta == 0.0 || !beta.is_finite() {
        return Err(0);
    }
    // One reciprocal per row instead of two divisions: the forward sweep
    // is a serial chain through the pivots, and the division is most of
    // each link.
    let mut inv = 1.0 / beta;
    work[0] = upper[0] * inv;
    rhs[0] *= inv;
    for i in 1..n {
        beta = diag[i] - lower[i] * work[i - 1];
        if beta == 0.0 || !beta.is_finite() {
            return Err(i);
        }
        inv = 1.0 / beta;
        work[i] = if i + 1 < n { upper[i] * inv } else { 0.0 };
        rhs[i] = (rhs[i] - lower[i] * rhs[i - 1]) * inv;
    }
    for i in (0..n - 1).rev() {
        rhs[i] -= work[i] * rhs[i + 1];
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn thomas_solves_known_system() {
        // [2 1 0; 1 3 1; 0 1 2] x = [4, 10, 8] has x = (1, 2, 3).
        let lower = [0.0, 1.0, 1.0];
        let diag = [2.0, 3.0, 2.0];
        let upper = [1.0, 1.0, 0.0];
        let mut rhs = [4.0, 10.0, 8.0];
        let mut work = [0.0; 3];
        solve_tridiagonal(&lower, &diag, &upper, &mut rhs, &mut work).expect("regular");
        for (got, want) in rhs.iter().zip([1.0, 2.0, 3.0]) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
    }

    #[test]
    fn thomas_matches_dense_elimination_on_random_dominant_system() {
        // Compare with Gaussian elimination on the same dense matrix.
        let n = 7;
        let mut seed = 12345u64;
        let mut rnd = || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((seed >> 33) as f64) / (1u64 << 31) as f64 - 0.5
        };
        let lower: Vec<f64> = (0..n).map(|_| rnd()).collect();
        let upper: Vec<f64> = (0..n).map(|_| rnd()).collect();
        let diag: Vec<f64> = (0..n).map(|_| 2.0 + rnd()).collect();
        let b: Vec<f64> = (0..n).map(|_| rnd()).collect();
        let mut dense = vec![vec![0.0; n + 1]; n];
        for i in 0..n {
            dense[i][i] = diag[i];
            if i > 0 {
                dense[i][i - 1] = lower[i];
            }
            if i + 1 < n {
                dense[i][i + 1] = upper[i];
            }
            dense[i][n] = b[i];
        }
        for k in 0..n {
            for i in k + 1..n {
                let f = dense[i][k] / dense[k][k];
                let pivot_row = dense[k].clone();
                for (dst, src) in dense[i][k..].iter_mut().zip(&pivot_row[k..]) {
                    *dst -= f * src;
                }
            }
        }
        let mut xs = vec![0.0; n];
        for i in (0..n).rev() {
            let s: f64 = (i + 1..n).map(|j| dense[i][j] * xs[j]).sum();
            xs[i] = (dense[i][n] - s) / dense[i][i];
        }
        let mut rhs = b.clone();
        let mut work = vec![0.0; n];
        solve_tridiagonal(&lower, &diag, &upper, &mut rhs, &mut work).expect("regular");
        for i in 0..n {
            assert!((rhs[i] - xs[i]).abs() < 1e-12);
        }
    }

    #[test]
    fn thomas_reports_zero_pivot() {
        let mut rhs = [1.0, 1.0];
        let mut work = [0.0; 2];
        assert_eq!(
            solve_tridiagonal(&[0.0, 1.0], &[0.0, 1.0], &[1.0, 0.0], &mut rhs, &mut work),
            Err(0)
        );
    }
}
