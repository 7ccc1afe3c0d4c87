//! A control valve with stiction, by the two-parameter data-driven model of Choudhury, Thornhill
//! & Shah ("Modelling valve stiction", *Control Engineering Practice* 13, 2005, 641–658). The
//! model's parameters are in percent of the valve's span:
//! - **S**, deadband plus stickband: after the valve stops or reverses, its input must travel S
//!   past the point where it stuck before the valve moves again the other way;
//! - **J**, the slip jump: the jump the valve makes when it breaks free.
//!
//! While it moves the valve follows its input, lagging it by (S − J)/2 in the direction of
//! travel; so after a reversal it stays put while the input covers S, then jumps by J. J = 0 is
//! a pure deadband (backlash) of width S, J = S pure stick-slip, J > S a valve that overshoots,
//! and S = J = 0 a perfect valve.
//!
//! What is recalled rather than read (from memory of the paper's flowchart, not checked against
//! the text): a valve that stops and then moves on in the same direction breaks free once its
//! input has travelled J beyond the point where it stopped (the stickband alone, no deadband to
//! cross); the output law y = x − sign(v)·(S − J)/2 while moving; the input clamped to the valve's
//! range. Our own choices, written here because the model leaves them open: the point where the
//! valve stuck is kept until it breaks free (small reversals of a noisy input inside the band do
//! not move it, as the net force on a real stem is what counts), and at the start the valve rests
//! in the middle of its deadband, so its first move in either direction needs (S + J)/2 and is a
//! jump of J like every other.

/// The two stiction parameters, percent of the valve's span.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stiction {
    /// Deadband plus stickband S (%).
    pub s_pct: f64,
    /// Slip jump J (%).
    pub j_pct: f64,
}

/// Whether the valve moves, and which way it last moved.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Motion {
    /// Moving with its input in direction `dir` (+1 or −1).
    Moving { dir: f64 },
    /// Stuck since its input was at `at`, after moving in direction `dir` (0 when it never
    /// moved: then it rests in the middle of its deadband).
    Stuck { at: f64, dir: f64 },
}

/// A sticky valve between a controller's output and the process: feed it the OP each step,
/// read back the valve's position (same units as the OP).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StickyValve {
    /// S and J in OP units.
    s: f64,
    j: f64,
    lo: f64,
    hi: f64,
    position: f64,
    last_input: f64,
    motion: Motion,
}

impl StickyValve {
    /// A valve with `stiction` over the range `[lo, hi]` (its span is what S and J are percent
    /// of), resting at `start`.
    pub fn new(stiction: Stiction, lo: f64, hi: f64, start: f64) -> StickyValve {
        let span = hi - lo;
        let start = start.clamp(lo, hi);
        StickyValve {
            s: stiction.s_pct / 100.0 * span,
            j: stiction.j_pct / 100.0 * span,
            lo,
            hi,
            position: start,
            last_input: start,
            motion: Motion::Stuck {
                at: start,
                dir: 0.0,
            },
        }
    }

    /// The valve's position now.
    pub fn position(&self) -> f64 {
        self.position
    }

    /// Moves the valve's input to `input` and returns where the valve is then.
    pub fn drive(&mut self, input: f64) -> f64 {
        let x = input.clamp(self.lo, self.hi);
        let dx = x - self.last_input;
        let step_dir = if dx > 0.0 {
            1.0
        } else if dx < 0.0 {
            -1.0
        } else {
            0.0
        };
        if let Motion::Moving { dir } = self.motion {
            if step_dir == dir {
                self.position = self.moving_position(x, dir);
            } else {
                // The input stopped or turned: the valve sticks where its input last was.
                self.motion = Motion::Stuck {
                    at: self.last_input,
                    dir,
                };
            }
        }
        if let Motion::Stuck { at, dir } = self.motion {
            let travel = x - at;
            let needed = if dir == 0.0 {
                (self.s + self.j) / 2.0
            } else if travel * dir > 0.0 {
                self.j
            } else {
                self.s
            };
            if travel.abs() > needed {
                let dir = travel.signum();
                self.motion = Motion::Moving { dir };
                self.position = self.moving_position(x, dir);
            }
        }
        self.last_input = x;
        self.position
    }

    /// Where a valve moving in direction `dir` stands for input `x`: (S − J)/2 behind it.
    fn moving_position(&self, x: f64, dir: f64) -> f64 {
        (x - dir * (self.s - self.j) / 2.0).clamp(self.lo, self.hi)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn valve(s_pct: f64, j_pct: f64) -> StickyValve {
        StickyValve::new(Stiction { s_pct, j_pct }, 0.0, 100.0, 50.0)
    }

    /// Drives the valve along `inputs` and returns its positions.
    fn drive_all(v: &mut StickyValve, inputs: impl IntoIterator<Item = f64>) -> Vec<f64> {
        inputs.into_iter().map(|x| v.drive(x)).collect()
    }

    /// A ramp from `from` to `to` in steps of 0.1.
    fn ramp(from: f64, to: f64) -> Vec<f64> {
        let n = ((to - from).abs() / 0.1).round() as usize;
        (1..=n)
            .map(|k| from + (to - from) * k as f64 / n as f64)
            .collect()
    }

    #[test]
    fn without_stiction_the_valve_passes_its_input_through() {
        let mut v = valve(0.0, 0.0);
        let inputs: Vec<f64> = (0..200)
            .map(|k| 50.0 + 10.0 * (k as f64 * 0.1).sin() + (k % 3) as f64)
            .collect();
        assert_eq!(drive_all(&mut v, inputs.clone()), inputs);
    }

    #[test]
    fn after_a_reversal_the_valve_waits_for_s_then_jumps_by_j() {
        // S = 4 %, J = 1 % of a 0–100 span: while moving up the valve lags its input by
        // (S − J)/2 = 1.5; after the input turns at 60 it stays at 58.5 until the input is
        // below 60 − 4 = 56, then jumps by J to (input + 1.5).
        let mut v = valve(4.0, 1.0);
        drive_all(&mut v, ramp(50.0, 60.0));
        assert!((v.position() - 58.5).abs() < 1e-9, "{}", v.position());
        let down = ramp(60.0, 50.0);
        let pos = drive_all(&mut v, down.clone());
        let first_move = pos.iter().position(|&p| p != 58.5).unwrap();
        // The input has travelled a little more than S when the valve breaks free.
        let input_then = down[first_move];
        assert!((55.9..=56.0 + 1e-9).contains(&input_then), "{input_then}");
        let jump = 58.5 - pos[first_move];
        assert!((jump - 1.0).abs() < 0.1 + 1e-6, "jump {jump}");
        // Then it follows its input from above, (S − J)/2 behind.
        assert!((v.position() - 51.5).abs() < 1e-9, "{}", v.position());
    }

    #[test]
    fn with_no_slip_jump_the_valve_is_a_pure_deadband() {
        // J = 0: the valve lags by S/2 while moving, holds while the input crosses the band
        // of width S after a reversal, and never jumps.
        let mut v = valve(3.0, 0.0);
        let mut inputs = ramp(50.0, 58.0);
        inputs.extend(ramp(58.0, 45.0));
        let pos = drive_all(&mut v, inputs.clone());
        let largest_move = pos
            .windows(2)
            .map(|w| (w[1] - w[0]).abs())
            .fold(0.0, f64::max);
        assert!(largest_move <= 0.1 + 1e-9, "{largest_move}");
        // Moving up: 1.5 behind; at the turn it holds 56.5 until the input is below 55.
        assert!(pos.iter().any(|&p| (p - 56.5).abs() < 1e-9));
        for (x, p) in inputs.iter().zip(&pos).skip(80) {
            if *x > 55.0 {
                assert!((p - 56.5).abs() < 1e-9, "{x} → {p}");
            }
        }
        assert!((v.position() - 46.5).abs() < 1e-9);
    }

    #[test]
    fn with_the_jump_equal_to_s_the_valve_sticks_then_catches_up_with_its_input() {
        // J = S: pure stick-slip, no deadband: once free the valve sits on its input.
        let mut v = valve(2.0, 2.0);
        drive_all(&mut v, ramp(50.0, 55.0));
        assert!((v.position() - 55.0).abs() < 1e-9);
        let pos = drive_all(&mut v, ramp(55.0, 52.0));
        assert!(pos.iter().take(19).all(|&p| p == 55.0), "{pos:?}");
        assert!((v.position() - 52.0).abs() < 1e-9);
    }

    #[test]
    fn a_valve_that_stops_moves_on_in_the_same_direction_after_j() {
        // Stopped at 55 after moving up (position 53.5 with S 4, J 1); moving up again it breaks
        // free once the input passes 55 + J = 56 (stickband only, no deadband to cross).
        let mut v = valve(4.0, 1.0);
        drive_all(&mut v, ramp(50.0, 55.0));
        drive_all(&mut v, [55.0, 55.0, 55.0]);
        let up = ramp(55.0, 57.0);
        let pos = drive_all(&mut v, up.clone());
        let first_move = pos.iter().position(|&p| p != 53.5).unwrap();
        assert!(
            (56.0..=56.1 + 1e-9).contains(&up[first_move]),
            "{}",
            up[first_move]
        );
        assert!((v.position() - 55.5).abs() < 1e-9);
    }

    #[test]
    fn a_sine_through_the_valve_loses_s_minus_j_of_its_swing() {
        // Derived from the model's law: on a sine of amplitude A > S the valve tops out at
        // A − (S − J)/2 from the centre in each direction (it lags by (S − J)/2 while moving).
        let mut v = valve(4.0, 1.0);
        let pos = drive_all(
            &mut v,
            (0..4000).map(|k| 50.0 + 10.0 * (k as f64 * 0.005).sin()),
        );
        let tail = &pos[1000..];
        let hi = tail.iter().fold(f64::MIN, |m, &p| m.max(p));
        let lo = tail.iter().fold(f64::MAX, |m, &p| m.min(p));
        assert!((hi - 58.5).abs() < 0.01, "{hi}");
        assert!((lo - 41.5).abs() < 0.01, "{lo}");
    }

    #[test]
    fn small_reversals_of_a_noisy_input_do_not_free_a_stuck_valve() {
        // ±0.5 of dither inside S = 4 around 50 never moves the valve, while a net drift of the
        // same input beyond S does.
        let mut v = valve(4.0, 1.0);
        let dither: Vec<f64> = (0..400)
            .map(|k| 50.0 + if k % 2 == 0 { 0.5 } else { -0.5 })
            .collect();
        assert!(drive_all(&mut v, dither).iter().all(|&p| p == 50.0));
        let drift: Vec<f64> = (0..400)
            .map(|k| 50.0 + 0.02 * k as f64 + if k % 2 == 0 { 0.5 } else { -0.5 })
            .collect();
        let pos = drive_all(&mut v, drift);
        assert!(v.position() > 55.0, "{pos:?}");
    }

    #[test]
    fn the_valve_stays_inside_its_range() {
        let mut v = valve(4.0, 6.0);
        let pos = drive_all(&mut v, ramp(50.0, 100.0));
        assert!(pos.iter().all(|&p| (0.0..=100.0).contains(&p)));
        assert_eq!(v.position(), 100.0);
    }
}
