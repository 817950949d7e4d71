//! Gauged tributaries: a lateral inflow that names a gauge takes its
//! hydrograph from that gauge's readings, assembled by the same rules as
//! the upstream inflow (observed first, short gaps interpolated, suspect
//! readings left out, then the extrapolation rule). Where the gauge cannot
//! be used, the reach description's own hydrograph for the tributary is
//! used and the run's provenance says why; with neither, the run fails
//! naming the tributary.

use super::{Forecaster, cycle::Basis};
use crate::{
    forecast::{
        assemble::{self, Rules},
        record::LateralProvenance,
        spec::FlowPoint,
    },
    store::{ReachVersion, StoreError},
};

impl Forecaster {
    /// The reach with each gauged tributary's inflow filled in from its
    /// gauge, and where each came from; `Err(text)` when a tributary has
    /// neither a usable gauge nor a hydrograph of its own.
    pub(super) async fn gauged_laterals(
        &self,
        reach: &ReachVersion,
        on: Basis,
        rules: &Rules,
    ) -> Result<Result<(ReachVersion, Vec<LateralProvenance>), String>, StoreError> {
        let mut out = reach.clone();
        let mut provenance = Vec::new();
        for (i, lateral) in out.spec.laterals.iter_mut().enumerate() {
            let Some(gauge) = lateral.gauge.clone() else {
                continue;
            };
            let assembled = match self.observed_gauge(&gauge, on, rules).await? {
                Ok((readings, basis)) => {
                    assemble::assemble(on.issued, &readings, &basis, None, rules)
                        .map_err(|e| e.to_string())
                }
                Err(e) => Err(e),
            };
            let (inflow, fallback) = match assembled {
                Ok(a) => {
                    lateral.inflow = flow_points(&a.series);
                    (Some(a.provenance), None)
                }
                Err(e) if !lateral.inflow.is_empty() => (
                    None,
                    Some(format!(
                        "gauge `{gauge}` could not be used ({e}); the reach description's own hydrograph was used"
                    )),
                ),
                Err(e) => {
                    return Ok(Err(format!(
                        "laterals[{i}] ({}): gauge `{gauge}` could not be used and the tributary has no hydrograph of its own: {e}",
                        lateral.name
                    )));
                }
            };
            provenance.push(LateralProvenance {
                name: lateral.name.clone(),
                gauge,
                inflow,
                fallback,
            });
        }
        Ok(Ok((out, provenance)))
    }
}

fn flow_points(h: &crate::forecast::hydrograph::Hydrograph) -> Vec<FlowPoint> {
    h.samples()
        .iter()
        .map(|(t, q)| FlowPoint {
            time: t.fixed_offset(),
            discharge: *q,
        })
        .collect()
}
