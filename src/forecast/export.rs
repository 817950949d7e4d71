//! The CSV table of forecast hydrographs, one writer for every CSV of
//! forecast values: the API's forecast (`format=csv`) and the offline
//! `route --out`. RFC 4180 with CRLF line ends, written by the `csv`
//! crate (quoting is the library's job).
//!
//! One header vocabulary, the unit in each column name:
//! `reach,run,point,chainage_m,time,stage_m,discharge_m3_per_s,caution`
//! (`_ft` and `_ft3_per_s` in US customary units). A run with an ensemble
//! adds one column per percentile before the caution, `stage_p10_m` and so
//! on. The caution is a
//! column of its own, repeated on every row, so that a plain RFC 4180
//! reader sees a rectangular table and a row copied out of it still says
//! it is advisory; a stale forecast says so in the same cell.

use super::{
    ensemble::summary::PercentileTrace,
    run::PointForecast,
    spec::Units,
    view::{PointView, UnitNames},
};

/// What every row of one table shares.
#[derive(Debug, Clone)]
pub struct TableContext<'a> {
    /// Reach name.
    pub reach: &'a str,
    /// Run id; `None` offline.
    pub run: Option<i64>,
    pub units: Units,
    /// The caution cell: [`crate::CAUTION`], plus the stale reasons when
    /// the forecast is stale.
    pub caution: String,
    /// Ensemble percentiles with a column each (empty: none).
    pub percentiles: Vec<f64>,
}

/// One point's hydrographs (values already in `ctx.units`).
#[derive(Debug, Clone, Copy)]
pub struct Rows<'a> {
    pub point: &'a str,
    pub chainage: f64,
    pub times: &'a [chrono::DateTime<chrono::Utc>],
    pub stage: &'a [f64],
    pub discharge: &'a [f64],
    /// Percentile stage traces, in the table's percentile order (empty:
    /// none, and the cells stay empty).
    pub bands: &'a [PercentileTrace],
}

impl<'a> From<&'a PointView> for Rows<'a> {
    fn from(p: &'a PointView) -> Self {
        Rows {
            bands: p.ensemble.as_ref().map_or(&[], |e| e.stage.as_slice()),
            ..Rows::from(&p.forecast)
        }
    }
}

impl<'a> From<&'a PointForecast> for Rows<'a> {
    fn from(p: &'a PointForecast) -> Self {
        Rows {
            point: &p.name,
            chainage: p.chainage,
            times: &p.times,
            stage: &p.stage,
            discharge: &p.discharge,
            bands: &[],
        }
    }
}

/// The caution cell of a forecast: the caution, and why it is stale.
pub fn caution_cell(stale_reasons: &[String]) -> String {
    if stale_reasons.is_empty() {
        crate::CAUTION.to_owned()
    } else {
        format!(
            "{} STALE FORECAST: {}.",
            crate::CAUTION,
            stale_reasons.join("; ")
        )
    }
}

fn header(units: Units, percentiles: &[f64]) -> Vec<String> {
    let u = UnitNames::of(units);
    let mut h = vec![
        "reach".to_owned(),
        "run".to_owned(),
        "point".to_owned(),
        format!("chainage_{}", u.elevation),
        "time".to_owned(),
        format!("stage_{}", u.stage),
        format!("discharge_{}", u.discharge.replace('/', "_per_")),
    ];
    // `{}` of an f64 prints 10 as `10` and 2.5 as `2.5`.
    h.extend(
        percentiles
            .iter()
            .map(|p| format!("stage_p{p}_{}", u.stage)),
    );
    h.push("caution".to_owned());
    h
}

/// The table as RFC 4180 text.
pub fn table<'a>(
    ctx: &TableContext<'_>,
    points: impl IntoIterator<Item = Rows<'a>>,
) -> Result<String, csv::Error> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(Vec::new());
    w.write_record(header(ctx.units, &ctx.percentiles))?;
    let run = ctx.run.map(|r| r.to_string()).unwrap_or_default();
    for p in points {
        let chainage = format!("{}", p.chainage);
        for (k, ((t, z), q)) in p.times.iter().zip(p.stage).zip(p.discharge).enumerate() {
            let mut record = vec![
                ctx.reach.to_owned(),
                run.clone(),
                p.point.to_owned(),
                chainage.clone(),
                crate::wire_time::format(*t),
                format!("{z:.4}"),
                format!("{q:.4}"),
            ];
            record.extend((0..ctx.percentiles.len()).map(|j| {
                p.bands
                    .get(j)
                    .and_then(|b| b.stage.get(k))
                    .map(|v| format!("{v:.4}"))
                    .unwrap_or_default()
            }));
            record.push(ctx.caution.clone());
            w.write_record(&record)?;
        }
    }
    let bytes = w.into_inner().map_err(|e| e.into_error())?;
    // The writer was given only `&str` fields, so its bytes are UTF-8.
    Ok(String::from_utf8_lossy(&bytes).into_owned())
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::{DateTime, Utc};

    fn t(s: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc)
    }

    /// RFC 4180 §2: CRLF line ends, a field with a comma, quote or line
    /// break in double quotes with quotes doubled, every record the same
    /// number of fields as the header.
    #[test]
    fn rectangular_rfc4180_with_the_caution_on_every_row() {
        let times = [t("2026-03-01T00:00:00Z"), t("2026-03-01T00:15:00Z")];
        let ctx = TableContext {
            reach: "Brindlemoor, upper",
            run: Some(7),
            units: Units::Si,
            caution: caution_cell(&[]),
            percentiles: Vec::new(),
        };
        let rows = Rows {
            point: "the \"old\" bridge",
            chainage: 1200.0,
            times: &times,
            stage: &[10.0, 10.25],
            discharge: &[5.0, 6.5],
            bands: &[],
        };
        let text = table(&ctx, [rows]).unwrap();
        let lines: Vec<&str> = text.split("\r\n").collect();
        assert_eq!(
            lines[0],
            "reach,run,point,chainage_m,time,stage_m,discharge_m3_per_s,caution"
        );
        assert!(lines[1].starts_with(
            "\"Brindlemoor, upper\",7,\"the \"\"old\"\" bridge\",1200,2026-03-01T00:00:00.000Z,10.0000,5.0000,"
        ));
        assert_eq!(lines[3], "", "ends with CRLF");
        let mut reader = csv::Reader::from_reader(text.as_bytes());
        let records: Vec<csv::StringRecord> = reader.records().map(Result::unwrap).collect();
        assert_eq!(records.len(), 2);
        assert!(
            records
                .iter()
                .all(|r| r.len() == 8 && &r[7] == crate::CAUTION)
        );
    }

    #[test]
    fn us_units_and_stale_caution() {
        assert_eq!(header(Units::Us, &[])[6], "discharge_ft3_per_s");
        assert_eq!(header(Units::Us, &[])[3], "chainage_ft");
        let h = header(Units::Si, &[2.5, 50.0]);
        assert_eq!(h[7..], ["stage_p2.5_m", "stage_p50_m", "caution"]);
        let c = caution_cell(&["the upstream gauge has been silent for 90 min".to_owned()]);
        assert!(c.starts_with(crate::CAUTION) && c.contains("STALE FORECAST: the upstream"));
    }
}
