//! Instrument loops: transmitters, controllers, alarms and gauges around the
//! process, joined by dashed signal lines routed clear of other symbols.
//!
//! Loop numbers are shared within a loop (LT-301 feeds LIC-301 which drives the
//! unit's control valve), as ISA-5.1 tag numbering does.

use super::{Builder, Equipment, UnitRoute, overlaps, seg_box};
use crate::geometry::BBox;
use crate::synth::symbols::Class;

impl Builder<'_> {
    /// The instrument loops of one unit: a level or flow transmitter, its
    /// controller driving the unit's control valve, an alarm, and a local gauge.
    pub(super) fn loops(&mut self, e: &Equipment, r: &UnitRoute) {
        let st = self.st;
        let rad = st.bubble_diameter_mm / 2.0;
        let mut transmitter: Option<((f64, f64), usize, char, u32)> = None;
        // Level transmitter on the equipment.
        if let Some((t_hi, t_lo)) = e.level_taps
            && self.rng.chance(0.8)
        {
            let ty = (t_hi.1 + t_lo.1) / 2.0;
            let cands: Vec<(f64, f64)> = [14.0, 18.0, 24.0]
                .iter()
                .flat_map(|dx| [0.0, -8.0, 8.0].map(|dy| (t_hi.0 + dx, ty + dy)))
                .collect();
            // A transmitter, or sometimes a local level gauge (no loop follows).
            let gauge = self.rng.chance(0.2);
            let cls = Class::BubbleField;
            let letters = if gauge { "LG" } else { "LT" };
            let number = self.next_loop();
            if let Some((c, idx)) = self.bubble(cls, letters, number, &cands) {
                let xm = t_hi.0 + 4.0;
                self.thin_line(
                    &[t_hi, (xm, t_hi.1), (xm, c.1), (c.0 - rad, c.1)],
                    st.signal_line_mm,
                );
                self.thin_line(&[t_lo, (xm, t_lo.1), (xm, c.1)], st.signal_line_mm);
                if !gauge {
                    transmitter = Some((c, idx, 'L', number));
                }
            }
        }
        // Flow (or other) transmitter on the discharge run.
        if let Some((a, b)) = r.run {
            let lo = a.0 + 6.0;
            let hi = r
                .valve
                .filter(|v| !v.vertical)
                .map_or(b.0 - 6.0, |v| v.centre.0 - 8.0);
            if hi > lo && (transmitter.is_none() || self.rng.chance(0.4)) {
                let x = self.rng.range_f64(lo, hi);
                let cands: Vec<(f64, f64)> = [0.0, -6.0, 6.0, -12.0]
                    .iter()
                    .flat_map(|dx| [14.0, 20.0].map(|dy| (x + dx, a.1 - dy)))
                    .collect();
                let first_letter = *self
                    .rng
                    .pick(&['F', 'F', 'P', 'T', 'A'])
                    .expect("non-empty");
                let letters = format!("{first_letter}T");
                let number = self.next_loop();
                if let Some((c, idx)) = self.bubble(Class::BubbleField, &letters, number, &cands) {
                    self.thin_line(&[(c.0, a.1), (c.0, c.1 + rad)], st.signal_line_mm);
                    if transmitter.is_none() {
                        transmitter = Some((c, idx, first_letter, number));
                    }
                }
            }
        }
        // Controller between transmitter and valve.
        if let (Some(v), Some((tc, t_idx, letter, number))) = (r.valve, transmitter) {
            let cands: Vec<(f64, f64)> = if v.vertical {
                [22.0, 28.0, 34.0]
                    .iter()
                    .flat_map(|dx| [0.0, -10.0, 10.0].map(|dy| (v.centre.0 + dx, v.centre.1 + dy)))
                    .collect()
            } else {
                [22.0, 28.0, 36.0]
                    .iter()
                    .flat_map(|dy| {
                        [0.0, -10.0, 10.0, -18.0].map(|dx| (v.centre.0 + dx, v.centre.1 - dy))
                    })
                    .collect()
            };
            let cls = if self.rng.chance(0.5) {
                Class::BubbleShared
            } else {
                Class::BubbleBoard
            };
            let fun = *self.rng.pick(&["IC", "IC", "RC", "C"]).expect("non-empty");
            let letters = format!("{letter}{fun}");
            if let Some((cc, c_idx)) = self.bubble(cls, &letters, number, &cands) {
                self.signal(tc, rad, (cc, rad), None, &[t_idx, c_idx]);
                let arrive = if v.vertical { (-1.0, 0.0) } else { (0.0, 1.0) };
                self.signal(cc, rad, (v.tip, 0.0), Some(arrive), &[c_idx, v.symbol]);
                // An alarm on the controller, sometimes.
                if self.rng.chance(0.45) {
                    let side = if self.rng.chance(0.5) { 1.0 } else { -1.0 };
                    let cands = [
                        (cc.0 + side * 20.0, cc.1),
                        (cc.0 - side * 20.0, cc.1),
                        (cc.0 + side * 26.0, cc.1 - 8.0),
                    ];
                    let alarm = format!(
                        "{letter}{}",
                        self.rng
                            .pick(&["AH", "AL", "SH", "I", "R"])
                            .expect("non-empty")
                    );
                    if let Some((ac, a_idx)) =
                        self.bubble(Class::BubbleBoard, &alarm, number, &cands)
                    {
                        self.signal(cc, rad, (ac, rad), None, &[c_idx, a_idx]);
                    }
                }
            }
        }
        // A local gauge on the pump discharge or the vessel top.
        let gauge_at = if let Some(p) = r.pump_discharge.filter(|_| self.rng.chance(0.6)) {
            Some((p.0 + 3.0, p.1))
        } else {
            e.vent.map(|v| (v.0 + e.body.w * 0.3, e.body.y + 2.0))
        };
        if let Some(p) = gauge_at {
            let cands = [
                (p.0 + 2.0, p.1 - 14.0),
                (p.0 + 8.0, p.1 - 16.0),
                (p.0 - 6.0, p.1 - 16.0),
                (p.0 + 12.0, p.1 - 22.0),
            ];
            let letters = *self.rng.pick(&["PI", "PG", "TI", "PI"]).expect("non-empty");
            let number = self.next_loop();
            if let Some((c, _)) = self.bubble(Class::BubbleField, letters, number, &cands) {
                self.thin_line(
                    &[
                        p,
                        (p.0, c.1 + rad + 2.0),
                        (c.0, c.1 + rad + 2.0),
                        (c.0, c.1 + rad),
                    ],
                    st.signal_line_mm,
                );
            }
        }
    }

    /// The next loop number (three digits).
    fn next_loop(&mut self) -> u32 {
        self.loop_no += 1;
        self.loop_no
    }

    /// Draws a dashed signal line from the bubble at `a` (radius `ar`) to point
    /// `b.0` (reached `b.1` short of it) along the first orthogonal route that
    /// crosses no labelled symbol but the two it joins; `arrive` forces the
    /// direction of travel on the last leg. Returns false when no route is clear.
    fn signal(
        &mut self,
        a: (f64, f64),
        ar: f64,
        b: ((f64, f64), f64),
        arrive: Option<(f64, f64)>,
        joins: &[usize],
    ) -> bool {
        let ((bx, by), br) = b;
        let (dx, dy) = (bx - a.0, by - a.1);
        let (sx, sy) = (dx.signum(), dy.signum());
        let mut paths = Vec::new();
        if dy.abs() < 1e-9 {
            paths.push(vec![(a.0 + ar * sx, a.1), (bx - br * sx, by)]);
        } else if dx.abs() < 1e-9 {
            paths.push(vec![(a.0, a.1 + ar * sy), (bx, by - br * sy)]);
        } else {
            let (xm, ym) = ((a.0 + bx) / 2.0, (a.1 + by) / 2.0);
            paths.push(vec![(a.0 + ar * sx, a.1), (bx, a.1), (bx, by - br * sy)]);
            paths.push(vec![(a.0, a.1 + ar * sy), (a.0, by), (bx - br * sx, by)]);
            paths.push(vec![
                (a.0, a.1 + ar * sy),
                (a.0, ym),
                (bx, ym),
                (bx, by - br * sy),
            ]);
            paths.push(vec![
                (a.0 + ar * sx, a.1),
                (xm, a.1),
                (xm, by),
                (bx - br * sx, by),
            ]);
        }
        let syms: Vec<BBox> = self
            .symbols
            .iter()
            .enumerate()
            .filter(|(k, _)| !joins.contains(k))
            .map(|(_, s)| s.bbox.scaled(1.0 / self.s))
            .collect();
        for path in paths {
            let n = path.len();
            let (p, q) = (path[n - 2], path[n - 1]);
            if let Some((ux, uy)) = arrive {
                let (lx, ly) = (q.0 - p.0, q.1 - p.1);
                if lx * ux + ly * uy <= 0.0 || (lx * uy - ly * ux).abs() > 1e-9 {
                    continue;
                }
            }
            let clear = path.windows(2).all(|w| {
                let bx = seg_box(w[0], w[1], self.st.signal_line_mm);
                !syms.iter().any(|s| overlaps(s, &bx)) && self.area.contains_box(&bx)
            });
            if clear {
                self.dashed_line(&path);
                return true;
            }
        }
        false
    }

    /// Extra single instruments (indicators, transmitters) on long process runs.
    pub(super) fn run_instruments(&mut self) {
        let st = self.st;
        let rad = st.bubble_diameter_mm / 2.0;
        let runs = self.runs.clone();
        for (a, b) in runs {
            let (horizontal, len) = super::run_span(a, b);
            if len < 30.0 || !self.rng.chance(0.75) {
                continue;
            }
            let t = self.rng.range_f64(0.2, 0.8);
            let p = (a.0 + (b.0 - a.0) * t, a.1 + (b.1 - a.1) * t);
            let side = if self.rng.chance(0.5) { 1.0 } else { -1.0 };
            let mut cands = Vec::new();
            for off in [14.0, 17.0] {
                for sgn in [side, -side] {
                    cands.push(if horizontal {
                        (p.0, p.1 + sgn * off)
                    } else {
                        (p.0 + sgn * off, p.1)
                    });
                }
            }
            let cls = if self.rng.chance(0.75) {
                Class::BubbleField
            } else {
                Class::BubbleBoard
            };
            let first = *self
                .rng
                .pick(&['T', 'P', 'F', 'A', 'T', 'P'])
                .expect("non-empty");
            let fun = *self.rng.pick(&["I", "T", "I", "G"]).expect("non-empty");
            let fun = if fun == "G" && first != 'P' { "I" } else { fun };
            let letters = format!("{first}{fun}");
            // Keep only candidates whose connection stub crosses nothing.
            let cands: Vec<(f64, f64)> = cands
                .into_iter()
                .filter(|c| {
                    let edge = if horizontal {
                        (c.0, c.1 - rad * (c.1 - p.1).signum())
                    } else {
                        (c.0 - rad * (c.0 - p.0).signum(), c.1)
                    };
                    let stub = seg_box(p, edge, 0.3);
                    !self.objects.iter().any(|o| overlaps(o, &stub))
                })
                .collect();
            let number = self.loop_no + 1;
            if let Some((c, _)) = self.bubble(cls, &letters, number, &cands) {
                self.loop_no = number;
                let edge = if horizontal {
                    (c.0, c.1 - rad * (c.1 - p.1).signum())
                } else {
                    (c.0 - rad * (c.0 - p.0).signum(), c.1)
                };
                self.thin_line(&[p, edge], st.signal_line_mm);
            }
        }
    }
}
