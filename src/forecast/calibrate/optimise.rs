//! Bounded minimisers for one and two parameters, hand-written because
//! each objective evaluation is a whole routing run: golden-section
//! search (Kiefer 1953) for one parameter and Nelder–Mead (Nelder and
//! Mead 1965) for two, with trial points projected into the box.

/// A minimum found: where, the objective there, and how many times the
/// objective was evaluated.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Found<X> {
    pub x: X,
    pub value: f64,
    pub evaluations: usize,
}

/// 1/φ, the golden ratio's inverse: each step keeps this fraction of the
/// bracket and reuses one interior point.
const INV_PHI: f64 = 0.618_033_988_749_894_9;

/// Golden-section search for a minimum of `f` on `[lo, hi]`, stopping when
/// the bracket is narrower than `tol`. Finds the minimum of a unimodal
/// function; a minimum at a bound is approached to within `tol`.
pub fn golden_section(mut f: impl FnMut(f64) -> f64, lo: f64, hi: f64, tol: f64) -> Found<f64> {
    let (mut a, mut b) = (lo, hi);
    let mut c = b - INV_PHI * (b - a);
    let mut d = a + INV_PHI * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    let mut evaluations = 2;
    while b - a > tol {
        if fc <= fd {
            b = d;
            (d, fd) = (c, fc);
            c = b - INV_PHI * (b - a);
            fc = f(c);
        } else {
            a = c;
            (c, fc) = (d, fd);
            d = a + INV_PHI * (b - a);
            fd = f(d);
        }
        evaluations += 1;
    }
    let (x, value) = if fc <= fd { (c, fc) } else { (d, fd) };
    Found {
        x,
        value,
        evaluations,
    }
}

/// A box: lower and upper bound of each parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bounds2 {
    pub lo: [f64; 2],
    pub hi: [f64; 2],
}

impl Bounds2 {
    fn project(&self, x: [f64; 2]) -> [f64; 2] {
        [
            x[0].clamp(self.lo[0], self.hi[0]),
            x[1].clamp(self.lo[1], self.hi[1]),
        ]
    }
}

/// When [`nelder_mead`] stops.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stop {
    /// The simplex's largest vertex distance from the best vertex.
    pub size: f64,
    /// At most this many evaluations.
    pub max_evaluations: usize,
}

fn lerp(a: [f64; 2], b: [f64; 2], t: f64) -> [f64; 2] {
    [a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1])]
}

fn distance(a: [f64; 2], b: [f64; 2]) -> f64 {
    (a[0] - b[0]).hypot(a[1] - b[1])
}

/// Nelder–Mead with the standard coefficients (reflection 1, expansion 2,
/// contraction ½, shrink ½; as in Lagarias et al. 1998, from memory),
/// every trial point projected into `bounds`. Starts from `x0` and the two
/// points `step` further along each axis (or back, where that leaves the
/// box).
pub fn nelder_mead(
    mut f: impl FnMut([f64; 2]) -> f64,
    x0: [f64; 2],
    step: f64,
    bounds: Bounds2,
    stop: Stop,
) -> Found<[f64; 2]> {
    let x0 = bounds.project(x0);
    let axis = |i: usize| {
        let mut x = x0;
        x[i] = if x0[i] + step <= bounds.hi[i] {
            x0[i] + step
        } else {
            x0[i] - step
        };
        bounds.project(x)
    };
    let mut evaluations = 0;
    let mut eval = |x: [f64; 2], n: &mut usize| {
        *n += 1;
        f(x)
    };
    let mut s: Vec<([f64; 2], f64)> = [x0, axis(0), axis(1)]
        .into_iter()
        .map(|x| (x, eval(x, &mut evaluations)))
        .collect();
    loop {
        s.sort_by(|a, b| a.1.total_cmp(&b.1));
        let size = distance(s[0].0, s[1].0).max(distance(s[0].0, s[2].0));
        if size < stop.size || evaluations >= stop.max_evaluations {
            break;
        }
        let centroid = lerp(s[0].0, s[1].0, 0.5);
        let worst = s[2];
        let r = bounds.project(lerp(worst.0, centroid, 2.0));
        let fr = eval(r, &mut evaluations);
        if fr < s[0].1 {
            let e = bounds.project(lerp(worst.0, centroid, 3.0));
            let fe = eval(e, &mut evaluations);
            s[2] = if fe < fr { (e, fe) } else { (r, fr) };
        } else if fr < s[1].1 {
            s[2] = (r, fr);
        } else {
            // Contract towards the better of the reflected and worst points.
            let (toward, ft) = if fr < worst.1 { (r, fr) } else { worst };
            let c = lerp(centroid, toward, 0.5);
            let fc = eval(c, &mut evaluations);
            if fc < ft {
                s[2] = (c, fc);
            } else {
                let best = s[0].0;
                for v in s.iter_mut().skip(1) {
                    let x = lerp(best, v.0, 0.5);
                    *v = (x, eval(x, &mut evaluations));
                }
            }
        }
    }
    Found {
        x: s[0].0,
        value: s[0].1,
        evaluations,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A parabola's minimum is its vertex (elementary calculus).
    #[test]
    fn golden_section_finds_a_parabola_vertex_and_a_bound() {
        let found = golden_section(|x| (x - 0.7).powi(2) + 3.0, 0.0, 2.0, 1e-6);
        assert!((found.x - 0.7).abs() < 1e-5, "{found:?}");
        assert!((found.value - 3.0).abs() < 1e-9);
        // log(2 / 1e-6) / log(φ) ≈ 30 steps plus the first two points.
        assert!(found.evaluations < 35, "{found:?}");
        let edge = golden_section(|x| x, 0.5, 2.0, 1e-4);
        assert!(
            (edge.x - 0.5).abs() < 1e-4,
            "an increasing function: the lower bound"
        );
    }

    const WIDE: Bounds2 = Bounds2 {
        lo: [-2.0, -2.0],
        hi: [2.0, 2.0],
    };
    const STOP: Stop = Stop {
        size: 1e-7,
        max_evaluations: 2000,
    };

    /// Rosenbrock's (1960) function has its one minimum, 0, at (1, 1).
    #[test]
    fn nelder_mead_finds_the_rosenbrock_minimum() {
        let rosen = |x: [f64; 2]| 100.0 * (x[1] - x[0] * x[0]).powi(2) + (1.0 - x[0]).powi(2);
        let found = nelder_mead(rosen, [-1.2, 1.0], 0.5, WIDE, STOP);
        assert!((found.x[0] - 1.0).abs() < 1e-3, "{found:?}");
        assert!((found.x[1] - 1.0).abs() < 1e-3, "{found:?}");
        assert!(found.value < 1e-6);
    }

    /// A bowl centred outside the box: the constrained minimum is the
    /// nearest box point (projection onto a box, elementary geometry).
    #[test]
    fn nelder_mead_stays_in_its_box() {
        let bounds = Bounds2 {
            lo: [0.5, 0.5],
            hi: [2.0, 2.0],
        };
        let bowl = |x: [f64; 2]| (x[0] - 3.0).powi(2) + (x[1] - 1.2).powi(2);
        let found = nelder_mead(bowl, [1.0, 1.0], 0.1, bounds, STOP);
        assert!((found.x[0] - 2.0).abs() < 1e-4, "{found:?}");
        assert!((found.x[1] - 1.2).abs() < 1e-4, "{found:?}");
    }
}
