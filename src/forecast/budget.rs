//! Bounds on the cost of one run, checked when a reach description is
//! stored: a reach whose numbers would make every run take minutes of CPU
//! (or fail) is refused up front, naming the field to change and the
//! budget it exceeds, instead of being accepted and then failing or
//! starving every other reach's forecast.

use super::spec::{Method, ReachSpec, SpecError};

/// The budgets (the service's `forecast.max_*` settings).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Budget {
    /// Most computational nodes.
    pub max_nodes: u64,
    /// Most stored output values: nodes × output instants.
    pub max_output_values: u64,
    /// Most time steps a run needs at least (its window over the largest
    /// step).
    pub max_steps: u64,
}

/// A budget exceeded: the field to change, the setting, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct OverBudget {
    pub field: &'static str,
    /// The configuration key of the budget.
    pub budget: &'static str,
    pub message: String,
}

impl From<OverBudget> for SpecError {
    fn from(o: OverBudget) -> Self {
        SpecError::new(o.field, o.message)
    }
}

/// Why a reach description cannot be stored.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Refusal {
    #[error("{0}")]
    Invalid(SpecError),
    #[error("{}: {}", .0.field, .0.message)]
    OverBudget(OverBudget),
}

/// The one check before a reach description is stored (by `PUT` or from
/// the reach folder): valid, its nodes build, and a run fits the budgets.
pub fn admit(spec: &ReachSpec, b: &Budget, window_s: f64) -> Result<(), Refusal> {
    let prepared = super::run::Prepared::new(spec).map_err(|e| match e {
        super::run::RunError::Spec(s) => Refusal::Invalid(s),
        other => Refusal::Invalid(SpecError::new("sections", other.to_string())),
    })?;
    check(spec, prepared.node_count(), window_s, b).map_err(Refusal::OverBudget)
}

/// Checks a reach with `nodes` computational nodes routed over a window of
/// `window_s` seconds (look-back plus horizon) against `b`.
pub fn check(spec: &ReachSpec, nodes: usize, window_s: f64, b: &Budget) -> Result<(), OverBudget> {
    let nodes = nodes as u64;
    if nodes > b.max_nodes {
        return Err(OverBudget {
            field: "max_node_spacing",
            budget: "forecast.max_nodes",
            message: format!(
                "the sections at this spacing make {nodes} computational nodes, more than the \
                 budget of {} (forecast.max_nodes); use a larger max_node_spacing",
                b.max_nodes
            ),
        });
    }
    let instants = (window_s / spec.routing.output_interval_s).ceil() as u64 + 1;
    let values = nodes.saturating_mul(instants);
    if values > b.max_output_values {
        return Err(OverBudget {
            field: "routing.output_interval_s",
            budget: "forecast.max_output_values",
            message: format!(
                "{nodes} nodes × {instants} output instants = {values} values per run, more \
                 than the budget of {} (forecast.max_output_values); use a longer output \
                 interval",
                b.max_output_values
            ),
        });
    }
    let (field, step) = match spec.routing.method {
        Method::Diffusive => ("routing.dt_max_s", spec.routing.dt_max_s),
        Method::Kinematic => ("routing.kinematic_dt_s", spec.routing.kinematic_dt_s),
    };
    let steps = (window_s / step).ceil() as u64;
    if steps > b.max_steps {
        return Err(OverBudget {
            field,
            budget: "forecast.max_steps",
            message: format!(
                "a {:.0} h window at steps of at most {step} s needs at least {steps} steps, \
                 more than the budget of {} (forecast.max_steps); use a larger step",
                window_s / 3600.0,
                b.max_steps
            ),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    const BUDGET: Budget = Budget {
        max_nodes: 2_000,
        max_output_values: 2_000_000,
        max_steps: 100_000,
    };

    fn spec(output_interval_s: f64, dt_max_s: f64) -> ReachSpec {
        let doc = serde_json::json!({
            "name": "Budget test reach (invented)",
            "sections": [
                {"name": "A", "chainage": 0, "geometry": {"shape": "trapezoid", "bed_elevation": 10,
                 "bottom_width": 20, "side_slope": 2, "n": 0.03}},
                {"name": "B", "chainage": 5000, "geometry": {"shape": "trapezoid", "bed_elevation": 8,
                 "bottom_width": 20, "side_slope": 2, "n": 0.03}}],
            "downstream": {"kind": "normal_depth", "friction_slope": 0.0004},
            "points": [{"name": "P", "chainage": 2500, "kind": "other"}],
            "routing": {"output_interval_s": output_interval_s, "dt_max_s": dt_max_s}
        });
        ReachSpec::from_json(&doc.to_string()).expect("spec")
    }

    /// 72 h = 259,200 s: at 900 s output, 289 instants; at 600 s steps at
    /// least 432 steps.
    #[test]
    fn each_budget_names_its_field() {
        let w = 72.0 * 3600.0;
        assert_eq!(check(&spec(900.0, 600.0), 501, w, &BUDGET), Ok(()));
        assert_eq!(
            check(&spec(900.0, 600.0), 2_001, w, &BUDGET)
                .unwrap_err()
                .budget,
            "forecast.max_nodes"
        );
        // 1,000 nodes × 25,921 instants (10 s output) = 25.9 M values.
        let e = check(&spec(10.0, 600.0), 1_000, w, &BUDGET).unwrap_err();
        assert_eq!(
            (e.field, e.budget),
            ("routing.output_interval_s", "forecast.max_output_values")
        );
        assert!(e.message.contains("25921000"), "{}", e.message);
        // 1 s steps over 72 h: 259,200 steps.
        let e = check(&spec(900.0, 1.0), 100, w, &BUDGET).unwrap_err();
        assert_eq!(
            (e.field, e.budget),
            ("routing.dt_max_s", "forecast.max_steps")
        );
    }
}
