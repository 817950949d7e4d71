//! The Thomas algorithm: the O(N) direct solve of the tridiagonal Newton
//! system (each residual involves a node and its two neighbours).

/// Solve a tridiagonal system by Gaussian elimination without pivoting
/// (the Thomas algorithm), eliminating from both ends towards the middle.
///
/// Row `i` reads `lower[i]·x[i−1] + diag[i]·x[i] + upper[i]·x[i+1] =
/// rhs[i]` (`lower[0]` and `upper[n−1]` are ignored). The solution
/// overwrites `rhs`; `work` is scratch of the same length. Returns the row
/// of a zero or non-finite pivot on failure. Without pivoting it is exact for
/// the diagonally dominant systems the θ-scheme produces at small steps and
/// in practice for larger ones; a failed pivot makes the caller halve the
/// step, which restores dominance through the storage term.
///
/// Why from both ends: each elimination step needs the previous pivot's
/// reciprocal, so a one-way sweep is a serial chain of N divisions. The
/// upper half eliminates downwards and the lower half upwards, two
/// independent chains of N/2 that the processor runs side by side; they
/// meet in the middle row (a "twisted" factorisation, common practice).
/// Same operation count as the one-way sweep.
pub(crate) fn solve_tridiagonal(
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
    // Rows 0..m are eliminated downwards (work = upper/β, rhs = d'), rows
    // m+1..n upwards (work = lower/α, rhs = g), row m last.
    let m = n / 2;
    let below = n - 1 - m; // rows m+1..n; never more than m
    for k in 0..below {
        top_row(k, (lower, diag, upper), work, rhs)?;
        let i = n - 1 - k;
        let (alpha, next) = if k == 0 {
            (diag[i], 0.0)
        } else {
            (diag[i] - upper[i] * work[i + 1], rhs[i + 1])
        };
        let inv = pivot(alpha, i)?;
        work[i] = lower[i] * inv;
        rhs[i] = (rhs[i] - upper[i] * next) * inv;
    }
    if m > below {
        top_row(m - 1, (lower, diag, upper), work, rhs)?;
    }
    // The middle row sees both eliminated neighbours.
    let mut beta = diag[m];
    let mut r = rhs[m];
    if m > 0 {
        beta -= lower[m] * work[m - 1];
        r -= lower[m] * rhs[m - 1];
    }
    if m + 1 < n {
        beta -= upper[m] * work[m + 1];
        r -= upper[m] * rhs[m + 1];
    }
    rhs[m] = r * pivot(beta, m)?;
    for i in (0..m).rev() {
        rhs[i] -= work[i] * rhs[i + 1];
    }
    for i in m + 1..n {
        rhs[i] -= work[i] * rhs[i - 1];
    }
    Ok(())
}

/// The reciprocal of a pivot, or the row of a zero or non-finite one.
#[inline(always)]
fn pivot(beta: f64, row: usize) -> Result<f64, usize> {
    if beta == 0.0 || !beta.is_finite() {
        Err(row)
    } else {
        Ok(1.0 / beta)
    }
}

/// Row `i` of the downward elimination.
#[inline(always)]
fn top_row(
    i: usize,
    (lower, diag, upper): (&[f64], &[f64], &[f64]),
    work: &mut [f64],
    rhs: &mut [f64],
) -> Result<(), usize> {
    let (beta, prev) = if i == 0 {
        (diag[0], 0.0)
    } else {
        (diag[i] - lower[i] * work[i - 1], rhs[i - 1])
    };
    let inv = pivot(beta, i)?;
    work[i] = upper[i] * inv;
    rhs[i] = (rhs[i] - lower[i] * prev) * inv;
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
        let mut rnd = lcg(12345);
        check_against_dense(7, &mut rnd);
    }

    /// Both halves and the meeting row: every size from 1 to 9 against
    /// Gaussian elimination on the dense matrix (textbook method).
    #[test]
    fn both_way_elimination_matches_dense_elimination_at_every_small_size() {
        let mut rnd = lcg(987);
        for n in 1..=9 {
            check_against_dense(n, &mut rnd);
        }
    }

    /// Uniform draws in [-0.5, 0.5) from a linear congruential generator
    /// (Knuth's MMIX constants).
    fn lcg(mut seed: u64) -> impl FnMut() -> f64 {
        move || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((seed >> 33) as f64) / (1u64 << 31) as f64 - 0.5
        }
    }

    /// A random diagonally dominant system of size `n` solved by the Thomas
    /// algorithm and by Gaussian elimination on the dense matrix.
    fn check_against_dense(n: usize, rnd: &mut impl FnMut() -> f64) {
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
            assert!((rhs[i] - xs[i]).abs() < 1e-12, "n = {n}, row {i}");
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
