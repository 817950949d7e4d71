//! A calibration as text for the terminal: what was fitted and why, the
//! multipliers before and after, and the skill of each on both windows.

use std::fmt::Write;

use super::{Calibration, Fitted, Skill};

fn num(v: Option<f64>, digits: usize) -> String {
    v.map_or_else(|| "-".to_owned(), |x| format!("{x:.digits$}"))
}

fn skill_row(out: &mut String, window: &str, before: &Skill, after: &Skill) {
    let _ = writeln!(
        out,
        "  {window:<9} {:>5}  {:>11}  {:>10}  {:>10}  {:>9}",
        before.pairs,
        num(before.rmse, 3),
        num(after.rmse, 3),
        num(before.nse, 3),
        num(after.nse, 3),
    );
}

/// The summary printed by `reachcast calibrate`.
pub fn summary(c: &Calibration) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "calibration of `{}` at point `{}`",
        c.proposed.name, c.point
    );
    let _ = writeln!(out, "  fit window:      {}", c.fit_window);
    let _ = writeln!(out, "  held-out window: {}", c.held_out_window);
    match &c.fitted {
        Fitted::Separately => {
            let _ = writeln!(
                out,
                "fitted: channel and floodplain multipliers separately (bounded Nelder–Mead)"
            );
        }
        Fitted::ChannelOnly { reason } => {
            let _ = writeln!(
                out,
                "fitted: one multiplier, the channel's (golden-section); the floodplain's is kept: {reason}"
            );
        }
    }
    let (b, a) = (c.before.multipliers, c.after.multipliers);
    let _ = writeln!(out, "  Manning's n multiplier  before   after");
    let _ = writeln!(
        out,
        "  channel                 {:>6.3}  {:>6.3}",
        b.channel, a.channel
    );
    let _ = writeln!(
        out,
        "  floodplain              {:>6.3}  {:>6.3}",
        b.floodplain, a.floodplain
    );
    let _ = writeln!(out, "stage at the point (m), before and after:");
    let _ = writeln!(
        out,
        "  window    pairs  RMSE before  RMSE after  NSE before  NSE after"
    );
    skill_row(&mut out, "fit", &c.before.fit, &c.after.fit);
    skill_row(&mut out, "held-out", &c.before.held_out, &c.after.held_out);
    let _ = writeln!(out, "{} routing runs.", c.evaluations);
    out.push_str(
        "A proposal, not applied: review it, then PUT the proposed reach description to \
         /api/reaches/{id} with an admin key (a new, audited reach version). Advisory model output only: \
         follow official warnings, local codes and licensed practice.\n",
    );
    out
}
