//! The members of a perturbed ensemble: one factor set per member, drawn by
//! Latin hypercube sampling (McKay, Beckman and Conover 1979) so that even
//! a few dozen members cover each factor's whole range evenly: every one
//! of the N equal strata of every factor holds exactly one member.

use super::{rng::SplitMix64, spec::EnsembleSpec};

/// What one member changes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Member {
    /// Factor on the inflow's rise above its value at the issue time.
    pub peak_scale: f64,
    /// Shift of that rise in time (s; positive is later).
    pub shift_s: f64,
    /// Factor on every Manning's n.
    pub manning: f64,
    /// Factor on discharges that come through a rating curve.
    pub rating: f64,
}

impl Member {
    /// The member that changes nothing: the deterministic run.
    pub const IDENTITY: Member = Member {
        peak_scale: 1.0,
        shift_s: 0.0,
        manning: 1.0,
        rating: 1.0,
    };

    /// Changes the inflow (scale or shift).
    pub fn changes_inflow(&self) -> bool {
        self.peak_scale != 1.0 || self.shift_s != 0.0
    }
}

/// `spec.members` members drawn from `seed`: the same seed gives the same
/// members on every machine.
pub fn design(spec: &EnsembleSpec, seed: u64) -> Vec<Member> {
    let n = spec.members;
    let mut rng = SplitMix64::new(seed);
    let shift = spec.timing_shift_hours * 3600.0;
    // One column of stratified unit draws per factor, in a fixed order so
    // adding a factor later does not silently change the others' draws.
    let peak = latin_column(&mut rng, n);
    let timing = latin_column(&mut rng, n);
    let manning = latin_column(&mut rng, n);
    let rating = latin_column(&mut rng, n);
    (0..n)
        .map(|k| Member {
            peak_scale: between(spec.peak_scale, peak[k]),
            shift_s: -shift + 2.0 * shift * timing[k],
            manning: between(spec.manning_factor, manning[k]),
            rating: between(spec.rating_factor, rating[k]),
        })
        .collect()
}

/// `[lo, hi]` at fraction `u`; exactly `lo` when the range is a point, so a
/// zero spread gives factors of exactly 1.
fn between([lo, hi]: [f64; 2], u: f64) -> f64 {
    if lo == hi { lo } else { lo + (hi - lo) * u }
}

/// N unit draws, one in each stratum [k/N, (k+1)/N), in random order.
fn latin_column(rng: &mut SplitMix64, n: usize) -> Vec<f64> {
    let strata = rng.permutation(n);
    strata
        .into_iter()
        .map(|k| (k as f64 + rng.next_unit()) / n as f64)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec(members: usize) -> EnsembleSpec {
        EnsembleSpec {
            members,
            ..EnsembleSpec::default()
        }
    }

    /// The defining property of a Latin hypercube (McKay et al. 1979):
    /// each factor has exactly one member in each of the N strata.
    #[test]
    fn every_stratum_of_every_factor_holds_one_member() {
        let s = spec(40);
        let m = design(&s, 11);
        let stratum = |v: f64, [lo, hi]: [f64; 2]| ((v - lo) / (hi - lo) * 40.0).floor() as usize;
        let check = |mut k: Vec<usize>| {
            k.sort_unstable();
            assert_eq!(k, (0..40).collect::<Vec<_>>());
        };
        check(
            m.iter()
                .map(|x| stratum(x.peak_scale, s.peak_scale))
                .collect(),
        );
        check(
            m.iter()
                .map(|x| stratum(x.manning, s.manning_factor))
                .collect(),
        );
        check(
            m.iter()
                .map(|x| stratum(x.rating, s.rating_factor))
                .collect(),
        );
        let h = s.timing_shift_hours * 3600.0;
        check(m.iter().map(|x| stratum(x.shift_s, [-h, h])).collect());
    }

    #[test]
    fn same_seed_same_members_other_seed_other_members() {
        let s = spec(20);
        assert_eq!(design(&s, 5), design(&s, 5));
        assert_ne!(design(&s, 5), design(&s, 6));
    }

    #[test]
    fn zero_spread_gives_identity_members() {
        let s = EnsembleSpec {
            members: 8,
            peak_scale: [1.0, 1.0],
            timing_shift_hours: 0.0,
            manning_factor: [1.0, 1.0],
            rating_factor: [1.0, 1.0],
            ..EnsembleSpec::default()
        };
        assert!(design(&s, 3).iter().all(|m| *m == Member::IDENTITY));
    }
}
