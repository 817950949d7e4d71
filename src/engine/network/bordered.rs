//! The network's Newton system and its direct solve by bordered (Schur
//! complement) elimination.
//!
//! Unknowns are the stages of every channel's own nodes (those not at a
//! junction), channel by channel, followed by the junction stages. Each
//! channel's own nodes form a tridiagonal block; its first own node also
//! depends on the upstream junction and its last on the downstream one,
//! and each junction's continuity equation depends on the junction stages
//! and on the own node next to it in every channel meeting it:
//!
//! ```text
//! [ T  C ] [x]   [r]      T: block-diagonal, one tridiagonal block per channel
//! [ B  D ] [y] = [s]      D: junction × junction (dense, small)
//! ```
//!
//! Eliminating x: `(D − B T⁻¹ C) y = s − B T⁻¹ r`, then
//! `x = T⁻¹ r − T⁻¹ C y`. `T⁻¹ C` has two columns per channel (one per
//! junction end), so each block costs three Thomas solves, and the
//! junction system is dense Gaussian elimination with partial pivoting on
//! a matrix as large as the number of junctions: O(N) per iteration for
//! N nodes plus O(J³) for J junctions (textbook block elimination, common
//! practice).

use crate::engine::diffusive::tridiagonal::solve_tridiagonal;

/// One channel's place in the system: its own nodes `start..start + len`
/// and the junctions at its ends.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Block {
    /// First own unknown.
    pub start: usize,
    /// Number of own unknowns (may be zero: a two-node channel between
    /// two junctions).
    pub len: usize,
    /// Junction at the upstream end.
    pub up: Option<usize>,
    /// Junction at the downstream end.
    pub down: Option<usize>,
}

/// The bordered system's coefficients and the scratch its solve needs, all
/// allocated once.
#[derive(Debug, Clone)]
pub struct Bordered {
    blocks: Vec<Block>,
    n_own: usize,
    n_junctions: usize,
    /// Sub-diagonal of each own row (ignored at a block's first row).
    pub lower: Vec<f64>,
    /// Diagonal of each own row.
    pub diag: Vec<f64>,
    /// Super-diagonal of each own row (ignored at a block's last row).
    pub upper: Vec<f64>,
    /// Per block: coefficient of the upstream junction in its first row.
    pub c_up: Vec<f64>,
    /// Per block: coefficient of the downstream junction in its last row.
    pub c_down: Vec<f64>,
    /// Per block: coefficient of its first own node in the upstream
    /// junction's row.
    pub b_up: Vec<f64>,
    /// Per block: coefficient of its last own node in the downstream
    /// junction's row.
    pub b_down: Vec<f64>,
    /// Junction × junction coefficients, row-major.
    pub d: Vec<f64>,
    col_up: Vec<f64>,
    col_down: Vec<f64>,
    scratch: Vec<f64>,
    schur: Vec<f64>,
}

impl Bordered {
    /// A zeroed system for these blocks (own unknowns numbered block by
    /// block, contiguous from 0) and `n_junctions` junctions.
    pub fn new(blocks: Vec<Block>, n_junctions: usize) -> Self {
        let n_own = blocks.iter().map(|b| b.start + b.len).max().unwrap_or(0);
        let nb = blocks.len();
        Self {
            blocks,
            n_own,
            n_junctions,
            lower: vec![0.0; n_own],
            diag: vec![0.0; n_own],
            upper: vec![0.0; n_own],
            c_up: vec![0.0; nb],
            c_down: vec![0.0; nb],
            b_up: vec![0.0; nb],
            b_down: vec![0.0; nb],
            d: vec![0.0; n_junctions * n_junctions],
            col_up: vec![0.0; n_own],
            col_down: vec![0.0; n_own],
            scratch: vec![0.0; n_own],
            schur: vec![0.0; n_junctions * n_junctions],
        }
    }

    /// Number of unknowns (own nodes plus junctions).
    pub fn len(&self) -> usize {
        self.n_own + self.n_junctions
    }

    /// Whether there are no unknowns.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Number of own (non-junction) unknowns; junction `j` is unknown
    /// `own_count() + j`.
    pub fn own_count(&self) -> usize {
        self.n_own
    }

    /// The blocks.
    pub fn blocks(&self) -> &[Block] {
        &self.blocks
    }

    /// Set every coefficient to zero.
    pub fn clear(&mut self) {
        for v in [
            &mut self.lower,
            &mut self.diag,
            &mut self.upper,
            &mut self.c_up,
            &mut self.c_down,
            &mut self.b_up,
            &mut self.b_down,
            &mut self.d,
        ] {
            v.fill(0.0);
        }
    }

    /// Solve the system for `rhs` (length [`Bordered::len`]), overwriting
    /// it with the solution. The coefficients are left as they were.
    /// Returns the unknown of a zero or non-finite pivot on failure.
    pub fn solve(&mut self, rhs: &mut [f64]) -> Result<(), usize> {
        let (n_own, nj) = (self.n_own, self.n_junctions);
        self.schur.copy_from_slice(&self.d);
        for (k, b) in self.blocks.iter().enumerate() {
            if b.len == 0 {
                continue;
            }
            let r = b.start..b.start + b.len;
            let (lo, di, up) = (
                &self.lower[r.clone()],
                &self.diag[r.clone()],
                &self.upper[r.clone()],
            );
            let scratch = &mut self.scratch[r.clone()];
            let fail = |row: usize| b.start + row;
            solve_tridiagonal(lo, di, up, &mut rhs[r.clone()], scratch).map_err(fail)?;
            if b.up.is_some() {
                let col = &mut self.col_up[r.clone()];
                col.fill(0.0);
                col[0] = self.c_up[k];
                solve_tridiagonal(lo, di, up, col, scratch).map_err(fail)?;
            }
            if b.down.is_some() {
                let col = &mut self.col_down[r.clone()];
                col.fill(0.0);
                col[b.len - 1] = self.c_down[k];
                solve_tridiagonal(lo, di, up, col, scratch).map_err(fail)?;
            }
            // The Schur complement and its right-hand side.
            let (first, last) = (b.start, b.start + b.len - 1);
            if let Some(ju) = b.up {
                let bu = self.b_up[k];
                self.schur[ju * nj + ju] -= bu * self.col_up[first];
                if let Some(jd) = b.down {
                    self.schur[ju * nj + jd] -= bu * self.col_down[first];
                }
                rhs[n_own + ju] -= bu * rhs[first];
            }
            if let Some(jd) = b.down {
                let bd = self.b_down[k];
                self.schur[jd * nj + jd] -= bd * self.col_down[last];
                if let Some(ju) = b.up {
                    self.schur[jd * nj + ju] -= bd * self.col_up[last];
                }
                rhs[n_own + jd] -= bd * rhs[last];
            }
        }
        dense_solve(&mut self.schur, nj, &mut rhs[n_own..]).map_err(|j| n_own + j)?;
        for b in &self.blocks {
            let r = b.start..b.start + b.len;
            if let Some(ju) = b.up {
                let y = rhs[n_own + ju];
                for (x, &c) in rhs[r.clone()].iter_mut().zip(&self.col_up[r.clone()]) {
                    *x -= c * y;
                }
            }
            if let Some(jd) = b.down {
                let y = rhs[n_own + jd];
                for (x, &c) in rhs[r.clone()].iter_mut().zip(&self.col_down[r.clone()]) {
                    *x -= c * y;
                }
            }
        }
        Ok(())
    }

    /// The whole matrix, dense and row-major (for checks and the
    /// benchmark's comparison with a dense LU).
    pub fn to_dense(&self) -> Vec<f64> {
        let n = self.len();
        let mut m = vec![0.0; n * n];
        for (k, b) in self.blocks.iter().enumerate() {
            for i in b.start..b.start + b.len {
                m[i * n + i] = self.diag[i];
                if i > b.start {
                    m[i * n + i - 1] = self.lower[i];
                }
                if i + 1 < b.start + b.len {
                    m[i * n + i + 1] = self.upper[i];
                }
            }
            if b.len == 0 {
                continue;
            }
            let (first, last) = (b.start, b.start + b.len - 1);
            if let Some(ju) = b.up {
                m[first * n + self.n_own + ju] += self.c_up[k];
                m[(self.n_own + ju) * n + first] += self.b_up[k];
            }
            if let Some(jd) = b.down {
                m[last * n + self.n_own + jd] += self.c_down[k];
                m[(self.n_own + jd) * n + last] += self.b_down[k];
            }
        }
        let nj = self.n_junctions;
        for a in 0..nj {
            for c in 0..nj {
                m[(self.n_own + a) * n + self.n_own + c] = self.d[a * nj + c];
            }
        }
        m
    }
}

/// Gaussian elimination with partial pivoting of the `n × n` row-major
/// matrix `a` (destroyed) for `b` (overwritten with the solution). Returns
/// the row of a zero or non-finite pivot.
fn dense_solve(a: &mut [f64], n: usize, b: &mut [f64]) -> Result<(), usize> {
    for k in 0..n {
        let p = (k..n)
            .max_by(|&i, &j| a[i * n + k].abs().total_cmp(&a[j * n + k].abs()))
            .unwrap_or(k);
        let pivot = a[p * n + k];
        if pivot == 0.0 || !pivot.is_finite() {
            return Err(k);
        }
        if p != k {
            for c in 0..n {
                a.swap(k * n + c, p * n + c);
            }
            b.swap(k, p);
        }
        for i in k + 1..n {
            let f = a[i * n + k] / pivot;
            if f == 0.0 {
                continue;
            }
            for c in k..n {
                a[i * n + c] -= f * a[k * n + c];
            }
            b[i] -= f * b[k];
        }
    }
    for k in (0..n).rev() {
        let s: f64 = (k + 1..n).map(|c| a[k * n + c] * b[c]).sum();
        b[k] = (b[k] - s) / a[k * n + k];
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Uniform draws in [-0.5, 0.5) (Knuth's MMIX linear congruential
    /// constants).
    fn lcg(mut seed: u64) -> impl FnMut() -> f64 {
        move || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((seed >> 33) as f64) / (1u64 << 31) as f64 - 0.5
        }
    }

    /// The bordered solve against Gaussian elimination with partial
    /// pivoting on the dense matrix (textbook method), for a loop with a
    /// tributary: blocks of every length from 0 to 5, two and three
    /// junctions meeting a block, a block with both ends at junctions.
    #[test]
    fn bordered_solve_matches_dense_elimination() {
        let mut rnd = lcg(4242);
        let layouts = [
            // (len, up, down): inflow → J0, J0 → J1 twice, J1 → outlet.
            vec![
                (5, None, Some(0)),
                (3, Some(0), Some(1)),
                (0, Some(0), Some(1)),
                (4, Some(1), None),
            ],
            // A confluence with a one-node tributary and a loop around it.
            vec![
                (1, None, Some(0)),
                (2, None, Some(0)),
                (2, Some(0), Some(1)),
                (1, Some(0), Some(2)),
                (3, Some(2), Some(1)),
                (2, Some(1), None),
            ],
        ];
        for layout in layouts {
            let mut start = 0;
            let blocks: Vec<Block> = layout
                .iter()
                .map(|&(len, up, down)| {
                    let b = Block {
                        start,
                        len,
                        up,
                        down,
                    };
                    start += len;
                    b
                })
                .collect();
            let nj = 1 + blocks
                .iter()
                .filter_map(|b| b.up.max(b.down))
                .max()
                .unwrap_or(0);
            let mut s = Bordered::new(blocks, nj);
            for v in [
                &mut s.lower,
                &mut s.upper,
                &mut s.c_up,
                &mut s.c_down,
                &mut s.b_up,
                &mut s.b_down,
            ] {
                v.iter_mut().for_each(|x| *x = rnd());
            }
            s.diag.iter_mut().for_each(|x| *x = 3.0 + rnd());
            s.d.iter_mut().for_each(|x| *x = rnd());
            for j in 0..nj {
                s.d[j * nj + j] = 4.0 + rnd();
            }
            let n = s.len();
            let b: Vec<f64> = (0..n).map(|_| rnd()).collect();
            let mut dense = s.to_dense();
            let mut want = b.clone();
            dense_solve(&mut dense, n, &mut want).expect("regular");
            let mut got = b.clone();
            s.solve(&mut got).expect("regular");
            for (i, (g, w)) in got.iter().zip(&want).enumerate() {
                assert!((g - w).abs() < 1e-12, "unknown {i}: {g} vs {w}");
            }
            // Residual of the dense matrix (the system really is solved).
            let m = s.to_dense();
            for i in 0..n {
                let r: f64 = (0..n).map(|c| m[i * n + c] * got[c]).sum::<f64>() - b[i];
                assert!(r.abs() < 1e-12, "row {i}: residual {r}");
            }
        }
    }

    #[test]
    fn dense_solve_pivots_and_reports_singular() {
        // [0 1; 1 0] x = [2, 3] needs a row swap: x = (3, 2).
        let mut a = vec![0.0, 1.0, 1.0, 0.0];
        let mut b = vec![2.0, 3.0];
        dense_solve(&mut a, 2, &mut b).expect("regular");
        assert_eq!(b, vec![3.0, 2.0]);
        let mut a = vec![1.0, 2.0, 2.0, 4.0];
        let mut b = vec![1.0, 1.0];
        assert_eq!(dense_solve(&mut a, 2, &mut b), Err(1));
    }
}
