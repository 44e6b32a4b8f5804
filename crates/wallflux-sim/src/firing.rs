//! A firing schedule: the kiln atmosphere set-point against time, as ramps at
//! a constant rate, holds, and a final cool-down. Pure: time since the start
//! of the firing is passed in, in seconds.

/// Seconds in an hour.
const S_PER_H: f64 = 3600.0;

/// One ramp to a target temperature followed by a hold there.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Segment {
    /// Ramp rate, °C/h (its magnitude: the ramp goes up or down to the target).
    pub rate_c_per_h: f64,
    /// Temperature at the end of the ramp, °C.
    pub target_c: f64,
    /// Time held at the target, h.
    pub hold_h: f64,
}

/// A whole firing: start temperature, segments in order, then cooling at a
/// constant rate to an end temperature, after which the set-point stays there.
#[derive(Clone, Debug, PartialEq)]
pub struct FiringSchedule {
    /// Set-point at time zero, °C.
    pub start_c: f64,
    /// Ramps and holds, in order.
    pub segments: Vec<Segment>,
    /// Cooling rate after the last hold, °C/h (magnitude). Linear cooling is
    /// a simplification of a kiln cooling by itself, whose rate falls off as
    /// it nears ambient.
    pub cool_rate_c_per_h: f64,
    /// Set-point at the end of cooling and after it, °C.
    pub end_c: f64,
}

/// Errors in a firing schedule.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScheduleError {
    /// A temperature must be finite and above absolute zero.
    #[error("{what} must be a finite temperature above −273.15 °C, got {value}")]
    Temperature { what: &'static str, value: f64 },
    /// A rate must be finite and strictly positive.
    #[error("{what} must be a positive number of °C/h, got {value}")]
    Rate { what: &'static str, value: f64 },
    /// A hold must be finite and not negative.
    #[error("segment {index}: hold must be a non-negative number of hours, got {value}")]
    Hold { index: usize, value: f64 },
}

/// Hours to ramp from `from_c` to `to_c` at `rate_c_per_h` (magnitude); zero
/// (a step) when the rate is zero or not finite.
fn ramp_h(from_c: f64, to_c: f64, rate_c_per_h: f64) -> f64 {
    let rate = rate_c_per_h.abs();
    if rate.is_finite() && rate > 0.0 {
        (to_c - from_c).abs() / rate
    } else {
        0.0
    }
}

/// A hold's length in hours, negative or NaN counted as zero.
fn hold_h(hold_h: f64) -> f64 {
    if hold_h > 0.0 {
        hold_h
    } else {
        0.0
    }
}

impl FiringSchedule {
    /// Checks every temperature, rate and hold. [`Self::setpoint_c`] never
    /// panics on an unchecked schedule: a rate that is zero or not finite
    /// steps at once, a negative or NaN hold counts as zero.
    pub fn validate(&self) -> Result<(), ScheduleError> {
        let temp = |what: &'static str, value: f64| {
            if value.is_finite() && value > -273.15 {
                Ok(())
            } else {
                Err(ScheduleError::Temperature { what, value })
            }
        };
        let rate = |what: &'static str, value: f64| {
            if value.is_finite() && value > 0.0 {
                Ok(())
            } else {
                Err(ScheduleError::Rate { what, value })
            }
        };
        temp("start temperature", self.start_c)?;
        temp("end temperature", self.end_c)?;
        rate("cooling rate", self.cool_rate_c_per_h)?;
        for (index, s) in self.segments.iter().enumerate() {
            temp("segment target", s.target_c)?;
            rate("segment rate", s.rate_c_per_h)?;
            if !(s.hold_h.is_finite() && s.hold_h >= 0.0) {
                return Err(ScheduleError::Hold {
                    index,
                    value: s.hold_h,
                });
            }
        }
        Ok(())
    }

    /// Kiln atmosphere set-point at `t_s` seconds after the start, °C:
    /// `start_c` before the start, then each segment's linear ramp
    /// `T = T_prev ± rate·t` to its target and its hold, then linear cooling
    /// to `end_c`, which holds from then on. NaN gives NaN.
    pub fn setpoint_c(&self, t_s: f64) -> f64 {
        if t_s.is_nan() {
            return f64::NAN;
        }
        let mut t_h = t_s / S_PER_H;
        if t_h <= 0.0 {
            return self.start_c;
        }
        let mut current_c = self.start_c;
        for s in &self.segments {
            let ramp = ramp_h(current_c, s.target_c, s.rate_c_per_h);
            if t_h < ramp {
                return current_c + (s.target_c - current_c) * (t_h / ramp);
            }
            t_h -= ramp;
            current_c = s.target_c;
            let hold = hold_h(s.hold_h);
            if t_h < hold {
                return current_c;
            }
            t_h -= hold;
        }
        let cool = ramp_h(current_c, self.end_c, self.cool_rate_c_per_h);
        if t_h < cool {
            return current_c + (self.end_c - current_c) * (t_h / cool);
        }
        self.end_c
    }

    /// Time from the start to the end of cooling, s.
    pub fn duration_s(&self) -> f64 {
        let mut total_h = 0.0;
        let mut current_c = self.start_c;
        for s in &self.segments {
            total_h += ramp_h(current_c, s.target_c, s.rate_c_per_h) + hold_h(s.hold_h);
            current_c = s.target_c;
        }
        total_h += ramp_h(current_c, self.end_c, self.cool_rate_c_per_h);
        total_h * S_PER_H
    }

    /// The demo's firing: a shuttle kiln taking stoneware-like ware to about
    /// 1240 °C. **Invented demo data**, chosen for round numbers and a
    /// plausible shape, not a recommended schedule for any ware or lining:
    ///
    /// | step | rate °C/h | to °C | hold h | ends at h |
    /// |------|----------:|------:|-------:|----------:|
    /// | start |          |    20 |        |         0 |
    /// | 1    |        60 |   200 |    1.0 |         4 |
    /// | 2    |       100 |  1000 |    0.5 |      12.5 |
    /// | 3    |        48 |  1240 |    1.5 |        19 |
    /// | cool |       130 |    70 |        |        28 |
    pub fn demo() -> Self {
        FiringSchedule {
            start_c: 20.0,
            segments: vec![
                Segment {
                    rate_c_per_h: 60.0,
                    target_c: 200.0,
                    hold_h: 1.0,
                },
                Segment {
                    rate_c_per_h: 100.0,
                    target_c: 1000.0,
                    hold_h: 0.5,
                },
                Segment {
                    rate_c_per_h: 48.0,
                    target_c: 1240.0,
                    hold_h: 1.5,
                },
            ],
            cool_rate_c_per_h: 130.0,
            end_c: 70.0,
        }
    }
    /// The demo's firing scaled to hold at `top_c` instead of its own top
    /// temperature: every target (the cooling end included) moves in
    /// proportion between the start temperature and the top, and every rate
    /// with it, so the firing keeps the demo's timeline (28 h) for any
    /// set-point above the start. A top at the start temperature gives a
    /// firing that stays there (zero rates step at once, see
    /// [`Self::setpoint_c`]).
    pub fn demo_to(top_c: f64) -> Self {
        let demo = Self::demo();
        let start = demo.start_c;
        let top = demo.segments.last().map_or(start, |s| s.target_c);
        let f = (top_c - start) / (top - start);
        let scale = |t_c: f64| start + (t_c - start) * f;
        FiringSchedule {
            start_c: start,
            segments: demo
                .segments
                .iter()
                .map(|s| Segment {
                    rate_c_per_h: s.rate_c_per_h * f.abs(),
                    target_c: scale(s.target_c),
                    hold_h: s.hold_h,
                })
                .collect(),
            cool_rate_c_per_h: demo.cool_rate_c_per_h * f.abs(),
            end_c: scale(demo.end_c),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const H: f64 = 3600.0;

    #[test]
    fn demo_duration_by_hand() {
        // Ramps 180/60 = 3 h, 800/100 = 8 h, 240/48 = 5 h, cool 1170/130 = 9 h;
        // holds 1 + 0.5 + 1.5 = 3 h. Total 28 h = 100 800 s.
        let s = FiringSchedule::demo();
        assert!(
            (s.duration_s() - 100_800.0).abs() < 1e-6,
            "{}",
            s.duration_s()
        );
        assert!(s.validate().is_ok());
    }

    #[test]
    fn demo_setpoints_by_hand() {
        let s = FiringSchedule::demo();
        let cases = [
            (-10.0, 20.0),       // before the start
            (0.0, 20.0),         // start
            (1.5 * H, 110.0),    // 20 + 60 × 1.5
            (3.5 * H, 200.0),    // first hold (3…4 h)
            (6.0 * H, 400.0),    // 200 + 100 × (6 − 4)
            (12.25 * H, 1000.0), // second hold (12…12.5 h)
            (13.5 * H, 1048.0),  // 1000 + 48 × (13.5 − 12.5)
            (18.0 * H, 1240.0),  // top hold (17.5…19 h)
            (23.0 * H, 720.0),   // 1240 − 130 × (23 − 19)
            (28.0 * H, 70.0),    // end of cooling
            (40.0 * H, 70.0),    // stays at the end temperature
        ];
        for (t, want) in cases {
            let got = s.setpoint_c(t);
            assert!(
                (got - want).abs() < 1e-9,
                "t = {} h: {got} vs {want}",
                t / H
            );
        }
        assert!(s.setpoint_c(f64::NAN).is_nan());
    }

    #[test]
    fn setpoint_is_continuous_at_every_boundary() {
        // Boundaries of the demo (h): 3, 4, 12, 12.5, 17.5, 19, 28. Across each,
        // within ±1 ms the set-point moves by at most the fastest rate times
        // 2 ms (130 °C/h × 2e-3 s / 3600 s/h = 7.2e-5 °C); a jump would be °C.
        let s = FiringSchedule::demo();
        for b_h in [3.0, 4.0, 12.0, 12.5, 17.5, 19.0, 28.0] {
            let t = b_h * H;
            let before = s.setpoint_c(t - 1e-3);
            let after = s.setpoint_c(t + 1e-3);
            assert!(
                (after - before).abs() < 1e-4,
                "at {b_h} h: {before} → {after}"
            );
        }
    }

    #[test]
    fn ramps_go_down_as_well_as_up_and_bad_rates_step() {
        // A segment below the current temperature ramps down at |rate|:
        // 500 → 300 at 100 °C/h takes 2 h; at 1 h it reads 400.
        let s = FiringSchedule {
            start_c: 500.0,
            segments: vec![Segment {
                rate_c_per_h: 100.0,
                target_c: 300.0,
                hold_h: 0.0,
            }],
            cool_rate_c_per_h: 50.0,
            end_c: 200.0,
        };
        assert!((s.setpoint_c(H) - 400.0).abs() < 1e-9);
        assert!((s.duration_s() - 4.0 * H).abs() < 1e-9); // 2 h + 100/50 h
                                                          // A zero rate is rejected by validate and steps at once in setpoint_c.
        let bad = FiringSchedule {
            segments: vec![Segment {
                rate_c_per_h: 0.0,
                target_c: 300.0,
                hold_h: 1.0,
            }],
            ..s.clone()
        };
        assert!(matches!(bad.validate(), Err(ScheduleError::Rate { .. })));
        assert!((bad.setpoint_c(1.0) - 300.0).abs() < 1e-9);
        let bad_hold = FiringSchedule {
            segments: vec![Segment {
                rate_c_per_h: 100.0,
                target_c: 300.0,
                hold_h: -1.0,
            }],
            ..s
        };
        assert!(matches!(
            bad_hold.validate(),
            Err(ScheduleError::Hold { index: 0, .. })
        ));
        assert!((bad_hold.duration_s() - 4.0 * H).abs() < 1e-9);
    }

    #[test]
    fn a_scaled_firing_keeps_the_timeline_and_holds_at_its_top() {
        // Scaled to 620 °C: f = (620 − 20)/(1240 − 20) = 0.4918…; the top hold
        // (17.5…19 h) reads 620, the first hold (3…4 h) 20 + 180 f = 108.52,
        // and the firing still lasts 28 h.
        let s = FiringSchedule::demo_to(620.0);
        let f = 600.0 / 1220.0;
        assert!(s.validate().is_ok());
        assert!(
            (s.duration_s() - 28.0 * H).abs() < 1e-6,
            "{}",
            s.duration_s()
        );
        assert!((s.setpoint_c(18.0 * H) - 620.0).abs() < 1e-9);
        assert!((s.setpoint_c(3.5 * H) - (20.0 + 180.0 * f)).abs() < 1e-9);
        // At every time the rise above the start is f times the demo's.
        let demo = FiringSchedule::demo();
        for t_h in [1.0, 6.0, 13.0, 21.0, 30.0] {
            let want = 20.0 + f * (demo.setpoint_c(t_h * H) - 20.0);
            assert!((s.setpoint_c(t_h * H) - want).abs() < 1e-9, "{t_h} h");
        }
    }
}
