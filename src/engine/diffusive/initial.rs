//! Where a run starts: the steady profile for the inflow at the start time,
//! or a saved (hot) state.
//!
//! The steady profile marches upstream from the downstream boundary with
//! the same discrete face relation the unsteady scheme uses, so a run whose
//! inflow does not change stays where it started.

use super::MIN_DEPTH;
use super::flux::{boundary_outflow, face_flow};
use super::forcing::Forcing;
use super::problem::{InitialState, Problem};
use crate::engine::props::Hydraulics;
use crate::engine::roots::solve_increasing;
use crate::engine::routing::{Reach, RoutingError};

/// Steady water surface for given face discharges (`face_discharge[j]`
/// between nodes `j` and `j+1`, non-negative) and a known downstream stage,
/// marching upstream with the same discrete face relation as the unsteady
/// solver, one bracketed root per face.
pub fn steady_profile<H: Hydraulics>(
    reach: &Reach<'_, H>,
    face_discharge: &[f64],
    downstream_stage: f64,
    slope_regularisation: f64,
) -> Result<Vec<f64>, RoutingError> {
    let n = reach.len();
    if face_discharge.len() + 1 != n {
        return Err(RoutingError::LengthMismatch {
            what: "face discharges",
            expected: n - 1,
            got: face_discharge.len(),
        });
    }
    let (x, nodes) = (reach.chainage(), reach.nodes());
    let mut z = vec![0.0; n];
    z[n - 1] = downstream_stage.max(nodes[n - 1].bed_elevation() + MIN_DEPTH);
    for j in (0..n - 1).rev() {
        let pb = nodes[j + 1].props(z[j + 1]);
        let (bed_a, bed_b) = (nodes[j].bed_elevation(), nodes[j + 1].bed_elevation());
        let dx = x[j + 1] - x[j];
        let lo = z[j + 1].max(bed_a + MIN_DEPTH);
        let q = face_discharge[j];
        let fail = RoutingError::SteadyProfile {
            node: j,
            chainage: x[j],
            discharge: q,
        };
        if !q.is_finite() {
            return Err(fail);
        }
        z[j] = solve_increasing(
            |za| {
                face_flow(
                    &nodes[j].props(za),
                    &pb,
                    bed_a,
                    bed_b,
                    dx,
                    slope_regularisation,
                )
                .0
            },
            lo,
            q,
        )
        .ok_or(fail)?;
    }
    Ok(z)
}

/// Stages at the start time, one per node, given the inflow `q_up` and the
/// laterals `lateral` (per node) there.
pub(super) fn initial_stages<H: Hydraulics>(
    p: &Problem<'_, H>,
    forcing: &mut Forcing<'_>,
    q_up: f64,
    lateral: &[f64],
) -> Result<Vec<f64>, RoutingError> {
    match &p.initial {
        InitialState::Steady => steady_start(p, forcing, q_up, lateral),
        InitialState::Hot(z) => hot_start(&p.reach, z),
    }
}

/// The steady profile for the start time's inflow and laterals.
fn steady_start<H: Hydraulics>(
    p: &Problem<'_, H>,
    forcing: &mut Forcing<'_>,
    q_up: f64,
    lateral: &[f64],
) -> Result<Vec<f64>, RoutingError> {
    let (x, nodes) = (p.reach.chainage(), p.reach.nodes());
    let n = nodes.len();
    // Face j carries the inflow plus the laterals of nodes 0..=j.
    let faces: Vec<f64> = lateral[..n - 1]
        .iter()
        .scan(q_up, |acc, &l| {
            *acc += l;
            Some(*acc)
        })
        .collect();
    let q_total = faces[n - 2] + lateral[n - 1];
    let z_down = match forcing.stage(p.start_time) {
        Some(s) => s,
        None => {
            let last = &nodes[n - 1];
            let bed = last.bed_elevation();
            solve_increasing(
                |z| boundary_outflow(&p.downstream, &last.props(z), bed).0,
                bed + MIN_DEPTH,
                q_total,
            )
            .ok_or(RoutingError::SteadyProfile {
                node: n - 1,
                chainage: x[n - 1],
                discharge: q_total,
            })?
        }
    };
    steady_profile(&p.reach, &faces, z_down, p.options.slope_regularisation)
}

/// Saved stages, checked and raised to at least `bed + MIN_DEPTH`.
fn hot_start<H: Hydraulics>(reach: &Reach<'_, H>, z: &[f64]) -> Result<Vec<f64>, RoutingError> {
    let n = reach.len();
    if z.len() != n {
        return Err(RoutingError::LengthMismatch {
            what: "hot-start stages",
            expected: n,
            got: z.len(),
        });
    }
    z.iter()
        .zip(reach.nodes())
        .enumerate()
        .map(|(i, (&zi, node))| {
            if zi.is_finite() {
                Ok(zi.max(node.bed_elevation() + MIN_DEPTH))
            } else {
                Err(RoutingError::NonFinite {
                    what: "hot-start stage",
                    index: i,
                })
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use crate::engine::diffusive::test_support::{
        hourly, hydrograph, normal_depth_problem, problem,
    };
    use crate::engine::diffusive::{DownstreamBoundary, InitialState, Reach, route};
    use crate::engine::series::Series;
    use crate::engine::test_sections::uniform_rect;

    #[test]
    fn steady_run_stays_steady_and_conserves_mass() {
        let (x, nodes) = uniform_rect(21, 100.0, 1e-3, 10.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let p = normal_depth_problem(reach, Series::constant(8.0).expect("valid"), 1e-3, 3);
        let r = route(&p).expect("runs");
        let first = &r.stage[0];
        for row in &r.stage {
            for (a, b) in row.iter().zip(first) {
                assert!((a - b).abs() < 1e-6);
            }
        }
        for q in r.discharge.last().expect("rows") {
            assert!((q - 8.0).abs() < 1e-4, "discharge {q}");
        }
        assert!(r.diagnostics.mass_balance_error_pct.abs() < 1e-6);
        assert!(r.diagnostics.steps > 0);
    }

    #[test]
    fn rating_boundary_runs_and_hot_start_continues() {
        let (x, nodes) = uniform_rect(21, 250.0, 5e-4, 20.0);
        let reach = Reach::new(&x, &nodes).expect("valid");
        let bed = nodes[20].bed;
        let table: Vec<(f64, f64)> = (0..30)
            .map(|k| {
                let h = 0.2 * k as f64;
                (bed + h, 20.0 / 0.035 * h.powf(5.0 / 3.0) * 5e-4_f64.sqrt())
            })
            .collect();
        let upstream = hydrograph(10.0, 60.0, 4.0 * 3600.0, 12.0 * 3600.0);
        let p = problem(
            reach,
            upstream.clone(),
            DownstreamBoundary::Rating {
                table: table.clone(),
            },
            hourly(12),
        );
        let full = route(&p).expect("runs");
        assert!(full.diagnostics.mass_balance_error_pct.abs() < 0.1);
        // Restart from the 6-hour state and compare the 12-hour state.
        let mut half = problem(
            reach,
            upstream,
            DownstreamBoundary::Rating { table },
            vec![6.0 * 3600.0],
        );
        let first = route(&half).expect("first half");
        half.initial = InitialState::Hot(first.final_state.clone());
        half.start_time = 6.0 * 3600.0;
        half.output_times = vec![12.0 * 3600.0];
        let second = route(&half).expect("second half");
        for (a, b) in second.final_state.iter().zip(&full.final_state) {
            // Different step sequences: agree to a few centimetres.
            assert!((a - b).abs() < 0.03, "{a} vs {b}");
        }
    }
}
