//! Tributary inflows from their gauges and uploads (laterals, and in a
//! reach of several channels the channels starting at a tributary): one that names
//! a gauge takes its hydrograph from that gauge's readings, then from the
//! upload in force for that tributary, then from the extrapolation rule —
//! the upstream inflow's rules (observed first, short gaps interpolated,
//! suspect readings left out). A lateral without a gauge but with an
//! upload takes the upload. Where the gauge cannot be used, the upload
//! alone or else the reach description's own hydrograph is used and the
//! run's provenance says why; with none of them the run fails naming the
//! tributary.

use super::{Forecaster, cycle::Basis};
use crate::{
    forecast::{
        assemble::{self, Rules},
        hydrograph::Hydrograph,
        record::LateralProvenance,
        spec::FlowPoint,
    },
    store::{InflowUpload, ReachVersion, StoreError},
};

/// The reach with its tributaries' inflows filled in, and where each came
/// from; `Err(text)` when one has nothing to go on.
type Filled = Result<(ReachVersion, Vec<LateralProvenance>), String>;

impl Forecaster {
    /// Fills in every tributary that has a gauge or an upload.
    pub(super) async fn gauged_laterals(
        &self,
        reach: &ReachVersion,
        on: Basis,
        rules: &Rules,
    ) -> Result<Filled, StoreError> {
        let mut out = reach.clone();
        let mut provenance = Vec::new();
        for (k, lateral) in reach.spec.tributaries().into_iter().enumerate() {
            // In `tributaries` order, so `k` finds the same one in the copy.
            let Some(inflow) = out.spec.tributary_inflow_mut(k) else {
                continue;
            };
            let upload = self
                .tributary_upload(&reach.reach_id, lateral.name, on)
                .await?;
            let Some(gauge) = lateral.gauge.map(str::to_owned) else {
                if let Some(u) = upload {
                    *inflow = flow_points(&u.series);
                    provenance.push(LateralProvenance {
                        name: lateral.name.to_owned(),
                        gauge: None,
                        inflow: None,
                        upload_version: Some(u.version),
                        fallback: None,
                    });
                }
                continue;
            };
            let input = upload.as_ref().map(|u| assemble::Upload {
                version: u.version,
                issued_at: u.uploaded_at,
                issued_by: u.uploaded_by.clone(),
                series: u.series.clone(),
            });
            let assembled = match self.observed_gauge(&gauge, on, rules).await? {
                Ok((readings, basis)) => {
                    assemble::assemble(on.issued, &readings, &basis, input.as_ref(), rules)
                        .map_err(|e| e.to_string())
                }
                Err(e) => Err(e),
            };
            let mut entry = LateralProvenance {
                name: lateral.name.to_owned(),
                gauge: Some(gauge.clone()),
                inflow: None,
                upload_version: None,
                fallback: None,
            };
            match (assembled, upload) {
                (Ok(a), _) => {
                    *inflow = flow_points(&a.series);
                    entry.upload_version = a.provenance.upload_version;
                    entry.inflow = Some(a.provenance);
                }
                (Err(e), Some(u)) => {
                    *inflow = flow_points(&u.series);
                    entry.upload_version = Some(u.version);
                    entry.fallback = Some(format!(
                        "gauge `{gauge}` could not be used ({e}); the upload for this tributary was used"
                    ));
                }
                (Err(e), None) if !lateral.inflow.is_empty() => {
                    entry.fallback = Some(format!(
                        "gauge `{gauge}` could not be used ({e}); the reach description's own hydrograph was used"
                    ));
                }
                (Err(e), None) => {
                    return Ok(Err(format!(
                        "{} ({}): gauge `{gauge}` could not be used and the tributary has no upload or hydrograph of its own: {e}",
                        lateral.path, lateral.name
                    )));
                }
            }
            provenance.push(entry);
        }
        Ok(Ok((out, provenance)))
    }

    /// The upload in force for a tributary, live or as of a hindcast.
    async fn tributary_upload(
        &self,
        reach_id: &str,
        name: &str,
        on: Basis,
    ) -> Result<Option<InflowUpload>, StoreError> {
        let store = &self.inner.store;
        match on.hindcast {
            None => store.newest_upload(reach_id, Some(name)).await,
            Some(_) => store.upload_as_of(reach_id, on.issued, Some(name)).await,
        }
    }
}

fn flow_points(h: &Hydrograph) -> Vec<FlowPoint> {
    h.samples()
        .iter()
        .map(|(t, q)| FlowPoint {
            time: t.fixed_offset(),
            discharge: *q,
        })
        .collect()
}
