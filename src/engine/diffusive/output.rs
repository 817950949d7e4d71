//! Dense output: stages and discharges at the requested times, exact at
//! the end of a step and interpolated linearly in time inside one, so
//! minute-by-minute output does not force minute-long steps.

/// The output times and what has been recorded for them so far.
pub(crate) struct DenseOutput<'a> {
    times: &'a [f64],
    /// Index of the first output time not yet recorded.
    next: usize,
    stage: Vec<Vec<f64>>,
    discharge: Vec<Vec<f64>>,
    /// State at the start of the current step.
    prev_z: Vec<f64>,
    prev_q: Vec<f64>,
}

impl<'a> DenseOutput<'a> {
    /// Start at time `t0` with stages `z` and node discharges `q`; output
    /// times up to `t0` report this state.
    pub(crate) fn new(times: &'a [f64], t0: f64, z: &[f64], q: &[f64]) -> Self {
        let mut out = Self {
            times,
            next: 0,
            stage: Vec::with_capacity(times.len()),
            discharge: Vec::with_capacity(times.len()),
            prev_z: z.to_vec(),
            prev_q: q.to_vec(),
        };
        while out.next < times.len() && times[out.next] <= t0 {
            out.stage.push(z.to_vec());
            out.discharge.push(out.prev_q.clone());
            out.next += 1;
        }
        out
    }

    /// Output times not yet reached.
    pub(crate) fn pending(&self) -> &'a [f64] {
        &self.times[self.next..]
    }

    /// A step from `t_prev` to `t_new` ended with stages `z` and node
    /// discharges `q`: record every output time it reached. Allocates only
    /// the rows it records (they are the result); the previous state is
    /// kept in place.
    pub(crate) fn step(&mut self, t_prev: f64, t_new: f64, z: &[f64], q: &[f64]) {
        while self.next < self.times.len() && self.times[self.next] <= t_new {
            let to = self.times[self.next];
            if to == t_new {
                self.stage.push(z.to_vec());
                self.discharge.push(q.to_vec());
            } else {
                let a = ((to - t_prev) / (t_new - t_prev)).clamp(0.0, 1.0);
                self.stage.push(lerp(&self.prev_z, z, a));
                self.discharge.push(lerp(&self.prev_q, q, a));
            }
            self.next += 1;
        }
        self.prev_z.copy_from_slice(z);
        self.prev_q.copy_from_slice(q);
    }

    /// Stages and discharges, `[output time][node]`.
    pub(crate) fn finish(self) -> (Vec<Vec<f64>>, Vec<Vec<f64>>) {
        (self.stage, self.discharge)
    }
}

/// `v0 + a (v1 − v0)`, element by element.
fn lerp(v0: &[f64], v1: &[f64], a: f64) -> Vec<f64> {
    v0.iter()
        .zip(v1)
        .map(|(x0, x1)| x0 + a * (x1 - x0))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outputs_inside_a_step_are_linear_in_time_and_exact_at_its_end() {
        // Linear interpolation reproduces a linear function exactly
        // (arithmetic): z goes 1 → 3 and q 10 → 30 over the step 0–100 s.
        let times = [0.0, 25.0, 50.0, 100.0, 150.0];
        let mut out = DenseOutput::new(&times, 0.0, &[1.0], &[10.0]);
        assert_eq!(out.pending(), &times[1..]);
        out.step(0.0, 100.0, &[3.0], &[30.0]);
        assert_eq!(out.pending(), &times[4..]);
        let (stage, discharge) = out.finish();
        assert_eq!(stage, vec![vec![1.0], vec![1.5], vec![2.0], vec![3.0]]);
        assert_eq!(
            discharge,
            vec![vec![10.0], vec![15.0], vec![20.0], vec![30.0]]
        );
    }
}
