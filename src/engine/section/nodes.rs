//! Computational nodes: one per surveyed section plus nodes in between,
//! whose tables blend the neighbouring sections' at equal depth.

use super::table::{BeyondTerm, MAX_TABLE_ROWS, PropertyTable, TableOptions};
use super::types::{CrossSection, GeometryError};
use super::validate::validate_reach;
use crate::engine::props::{Hydraulics, Props};

/// Largest number of computational nodes [`build_nodes`] will create.
pub const MAX_NODES: usize = 20_000;

impl PropertyTable {
    /// Table for a section between `a` (weight `1 − w`) and `b` (weight `w`),
    /// `0 ≤ w ≤ 1`, e.g. at a fraction `w` of the way from `a`'s chainage to
    /// `b`'s.
    ///
    /// Properties are interpolated at equal depth above each section's bed:
    /// the bed elevation interpolates linearly and the hydraulic properties
    /// travel with it, which keeps a sloping reach from being flooded or
    /// drained by the interpolation. The grid is the finer of the two; above
    /// both tables the closed-form continuations are blended the same way.
    pub fn blend(a: &PropertyTable, b: &PropertyTable, w: f64) -> Result<Self, GeometryError> {
        if !(0.0..=1.0).contains(&w) {
            return Err(GeometryError::InvalidOption {
                field: "w",
                requirement: "within [0, 1]",
                value: w,
            });
        }
        let dz = a.dz.min(b.dz);
        let height = (a.last * a.dz).max(b.last * b.dz);
        let intervals = (height / dz - 1e-9).ceil().max(1.0);
        if intervals >= MAX_TABLE_ROWS as f64 {
            return Err(GeometryError::TableTooLarge {
                section: "(interpolated)".to_owned(),
                rows: intervals as usize + 1,
                limit: MAX_TABLE_ROWS,
            });
        }
        let intervals = intervals as usize;
        let samples: Vec<[f64; 4]> = (0..=2 * intervals)
            .map(|k| {
                let d = k as f64 * 0.5 * dz;
                let pa = a.props(a.bed + d);
                let pb = b.props(b.bed + d);
                let mix = |x: f64, y: f64| (1.0 - w) * x + w * y;
                [
                    mix(pa.storage_area, pb.storage_area),
                    mix(pa.flow_area, pb.flow_area),
                    mix(pa.wetted_perimeter, pb.wetted_perimeter),
                    mix(pa.conveyance, pb.conveyance),
                ]
            })
            .collect();
        let beyond = a
            .beyond
            .iter()
            .map(|t| (t, 1.0 - w))
            .chain(b.beyond.iter().map(|t| (t, w)))
            .filter(|(_, weight)| *weight > 0.0)
            .map(|(t, weight)| BeyondTerm {
                weight: t.weight * weight,
                ..*t
            })
            .collect();
        let flag_depth = match (w > 0.0, w < 1.0) {
            (true, true) => a.flag_depth.min(b.flag_depth),
            (true, false) => b.flag_depth,
            _ => a.flag_depth,
        };
        Ok(Self::assemble(
            (1.0 - w) * a.bed + w * b.bed,
            dz,
            samples,
            flag_depth,
            beyond,
        ))
    }
}

/// A computational node: a chainage and the table the solver uses there.
#[derive(Debug, Clone, PartialEq)]
pub struct Node {
    /// Distance along the reach (m).
    pub chainage: f64,
    /// Section properties at this node.
    pub table: PropertyTable,
}

impl Hydraulics for Node {
    fn bed_elevation(&self) -> f64 {
        self.table.bed()
    }

    #[inline]
    fn props(&self, z: f64) -> Props {
        self.table.props(z)
    }

    #[inline(always)]
    fn props_into(&self, z: f64, out: &mut Props) {
        self.table.props_into(z, out);
    }
}

/// Validates a reach and builds its computational nodes with default
/// [`TableOptions`]: one node per section plus interpolated nodes so that no
/// two neighbours are more than `max_spacing` metres apart.
pub fn build_nodes(
    sections: &[CrossSection],
    max_spacing: f64,
) -> Result<Vec<Node>, GeometryError> {
    build_nodes_with(sections, max_spacing, &TableOptions::default())
}

/// [`build_nodes`] with explicit table options.
///
/// Each gap between surveyed sections is split into equal parts; interpolated
/// nodes use [`PropertyTable::blend`] with the fractional distance as weight.
pub fn build_nodes_with(
    sections: &[CrossSection],
    max_spacing: f64,
    options: &TableOptions,
) -> Result<Vec<Node>, GeometryError> {
    if !(max_spacing.is_finite() && max_spacing > 0.0) {
        return Err(GeometryError::InvalidOption {
            field: "max_spacing",
            requirement: "positive and finite",
            value: max_spacing,
        });
    }
    validate_reach(sections)?;
    let mut parts = Vec::with_capacity(sections.len());
    let mut count = 1_usize;
    for pair in sections.windows(2) {
        let gap = pair[1].chainage - pair[0].chainage;
        let k = (gap / max_spacing - 1e-9).ceil().max(1.0);
        // Float-to-integer casts saturate, so a huge `k` cannot wrap.
        let k = k as usize;
        count = count.saturating_add(k);
        if count > MAX_NODES {
            return Err(GeometryError::TooManyNodes {
                max_spacing,
                count,
                limit: MAX_NODES,
            });
        }
        parts.push(k);
    }
    if count > MAX_NODES {
        return Err(GeometryError::TooManyNodes {
            max_spacing,
            count,
            limit: MAX_NODES,
        });
    }
    let tables = sections
        .iter()
        .map(|s| PropertyTable::build(s, options))
        .collect::<Result<Vec<_>, _>>()?;
    let mut nodes = Vec::with_capacity(count);
    for (i, (section, table)) in sections.iter().zip(&tables).enumerate() {
        nodes.push(Node {
            chainage: section.chainage,
            table: table.clone(),
        });
        if let (Some(&k), Some(next), Some(next_table)) =
            (parts.get(i), sections.get(i + 1), tables.get(i + 1))
        {
            let gap = next.chainage - section.chainage;
            // Between sections of one shape (a prismatic stretch) the
            // equal-depth blend is that shape again on the interpolated
            // bed, up to rounding; taking it as such spares resampling
            // both tables for every node, most of the cost of building a
            // prismatic reach (bench `engine`, prismatic case).
            let same = table.same_shape(next_table);
            for j in 1..k {
                let w = j as f64 / k as f64;
                let table = if same {
                    table.with_bed((1.0 - w) * table.bed() + w * next_table.bed())
                } else {
                    PropertyTable::blend(table, next_table, w)?
                };
                nodes.push(Node {
                    chainage: section.chainage + w * gap,
                    table,
                });
            }
        }
    }
    Ok(nodes)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::section::SectionGeometry;
    use crate::engine::section::fixtures::{close, profile, rect, v_profile, xs};

    #[test]
    fn blend_interpolates_at_equal_depth() {
        let a = PropertyTable::from_section(&xs("a", 0.0, rect(10.0, 5.0, 0.03))).expect("ok");
        let b = PropertyTable::from_section(&xs("b", 100.0, rect(20.0, 4.0, 0.03))).expect("ok");
        let m = PropertyTable::blend(&a, &b, 0.25).expect("ok");
        assert!(close(m.bed(), 4.75, 1e-12));
        for d in [0.5, 1.0, 3.0, 30.0] {
            let p = m.props(4.75 + d);
            let width = 0.75 * 10.0 + 0.25 * 20.0;
            assert!(close(p.storage_area, width * d, 1e-9), "d={d}");
            let k = 0.75 * a.props(5.0 + d).conveyance + 0.25 * b.props(4.0 + d).conveyance;
            assert!(close(p.conveyance, k, 1e-9), "d={d}");
        }
        let same = PropertyTable::blend(&a, &b, 0.0).expect("ok");
        assert!(close(
            same.props(6.3).conveyance,
            a.props(6.3).conveyance,
            1e-12
        ));
        assert!(PropertyTable::blend(&a, &b, 1.5).is_err());
        assert!(PropertyTable::blend(&a, &b, f64::NAN).is_err());
    }

    #[test]
    fn blend_of_unlike_sections_is_consistent() {
        let a = PropertyTable::from_section(&xs("a", 0.0, v_profile())).expect("ok");
        let g = profile(
            vec![
                [0.0, 9.0],
                [3.0, 7.5],
                [10.0, 7.5],
                [11.0, 5.0],
                [16.0, 5.0],
                [17.0, 7.5],
                [30.0, 8.0],
            ],
            10.0,
            17.0,
        );
        let b = PropertyTable::from_section(&xs("b", 0.0, g)).expect("ok");
        let w = 0.4;
        let m = PropertyTable::blend(&a, &b, w).expect("ok");
        // At equal depth every quantity is the weighted mean, both on the
        // grid and above all tables (closed-form continuation).
        for d in [0.25, 1.333, 2.5, 3.75, 6.0, 50.0] {
            let (pa, pb, pm) = (a.props(10.0 + d), b.props(5.0 + d), m.props(m.bed() + d));
            let mix = |x: f64, y: f64| (1.0 - w) * x + w * y;
            assert!(close(
                pm.storage_area,
                mix(pa.storage_area, pb.storage_area),
                1e-6
            ));
            assert!(close(
                pm.wetted_perimeter,
                mix(pa.wetted_perimeter, pb.wetted_perimeter),
                1e-6
            ));
            assert!(
                close(pm.conveyance, mix(pa.conveyance, pb.conveyance), 1e-5),
                "d={d}"
            );
            assert_eq!(pm.extrapolated, pa.extrapolated || pb.extrapolated, "d={d}");
        }
        // Continuous across the table top and monotone storage throughout.
        let top = m.top_elevation();
        let (lo, hi) = (m.props(top - 1e-9), m.props(top + 1e-9));
        assert!(close(hi.storage_area, lo.storage_area, 1e-8));
        assert!(close(hi.conveyance, lo.conveyance, 1e-6));
        let mut prev = 0.0;
        let mut z = m.bed() - 0.1;
        while z < top + 2.0 {
            let p = m.props(z);
            assert!(p.storage_area >= prev);
            assert!(p.storage_top_width >= 0.0);
            prev = p.storage_area;
            z += 0.00731;
        }
        // Blending a blend again keeps the same rules.
        let mm = PropertyTable::blend(&m, &b, 0.5).expect("ok");
        let d = 40.0;
        let expect = 0.5 * m.props(m.bed() + d).conveyance + 0.5 * b.props(5.0 + d).conveyance;
        assert!(close(mm.props(mm.bed() + d).conveyance, expect, 1e-9));
    }

    /// Equal-depth interpolation between two sections of one shape gives
    /// that shape (arithmetic: (1 − w) P + w P = P), so the nodes of a
    /// prismatic reach, built without blending, match the blend to
    /// rounding at every depth, inside and above the tables.
    #[test]
    fn prismatic_nodes_match_the_blend_of_their_sections() {
        let trapezoid = |bed: f64| SectionGeometry::Trapezoid {
            bed_elevation: bed,
            bottom_width: 12.0,
            side_slope: 1.5,
            n: 0.03,
            height: None,
        };
        let s = vec![xs("a", 0.0, trapezoid(5.0)), xs("b", 400.0, trapezoid(4.6))];
        let nodes = build_nodes(&s, 100.0).expect("ok");
        assert_eq!(nodes.len(), 5);
        let (a, b) = (&nodes[0].table, &nodes[4].table);
        for (j, node) in nodes.iter().enumerate().take(4).skip(1) {
            let w = j as f64 / 4.0;
            let blend = PropertyTable::blend(a, b, w).expect("ok");
            assert!(close(node.bed_elevation(), blend.bed(), 1e-15));
            for d in [0.0, 0.004, 0.37, 2.0, 9.99, 11.5, 40.0] {
                let (p, q) = (
                    node.props(node.bed_elevation() + d),
                    blend.props(blend.bed() + d),
                );
                assert!(close(p.storage_area, q.storage_area, 1e-12), "d={d}");
                assert!(close(p.conveyance, q.conveyance, 1e-12), "d={d}");
                assert!(close(p.dconveyance_dz, q.dconveyance_dz, 1e-10), "d={d}");
                assert!(
                    close(p.storage_top_width, q.storage_top_width, 1e-10),
                    "d={d}"
                );
                assert_eq!(p.extrapolated, q.extrapolated);
            }
        }
        // Sections of different shape are still blended.
        let t = vec![
            xs("a", 0.0, trapezoid(5.0)),
            xs("c", 400.0, rect(20.0, 4.6, 0.03)),
        ];
        let mixed = build_nodes(&t, 100.0).expect("ok");
        let blend = PropertyTable::blend(&mixed[0].table, &mixed[4].table, 0.5).expect("ok");
        assert_eq!(mixed[2].table, blend);
    }

    #[test]
    fn build_nodes_inserts_interpolated_nodes() {
        let s = vec![
            xs("a", 0.0, rect(10.0, 5.0, 0.03)),
            xs("b", 250.0, rect(20.0, 4.0, 0.03)),
            xs("c", 300.0, rect(20.0, 3.9, 0.03)),
        ];
        let nodes = build_nodes(&s, 100.0).expect("ok");
        let ch: Vec<f64> = nodes.iter().map(|n| n.chainage).collect();
        assert_eq!(ch.len(), 5);
        assert!(close(ch[1], 250.0 / 3.0, 1e-12));
        assert_eq!(ch[3], 250.0);
        assert_eq!(ch[4], 300.0);
        for w in ch.windows(2) {
            assert!(w[1] - w[0] <= 100.0 + 1e-9);
        }
        assert!(close(nodes[1].bed_elevation(), 5.0 - 1.0 / 3.0, 1e-12));
        assert!(matches!(
            build_nodes(&s, 0.0),
            Err(GeometryError::InvalidOption { .. })
        ));
        assert!(matches!(
            build_nodes(&s, 1e-4),
            Err(GeometryError::TooManyNodes { .. })
        ));
        assert_eq!(build_nodes(&[], 10.0), Err(GeometryError::EmptyReach));
        let one = build_nodes(&s[..1], 10.0).expect("ok");
        assert_eq!(one.len(), 1);
    }
}
