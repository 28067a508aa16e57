//! The capacity search at one node in one scenario: the stepped reference, the certified fast
//! search, the per-criterion capacities and the binding (criterion, element).

use std::collections::HashMap;

use headroom_flow::{FlowState, Injection, SolveSettings, solve};
use headroom_model::BusIdx;

use crate::criteria::{
    ALL, CHANGE, Element, Limit, OVER, REVERSE, Snapshot, THERMAL, UNDER, first_crossing,
    predict_crossing_pu,
};
use crate::prepare::{FeederStudy, ScenarioCase};

/// How the capacity is searched. Both return the same numbers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum SearchMethod {
    /// Predicts the limit from the path impedance and the solved injections, then certifies the
    /// answer with a passing load flow at it and a failing one a resolution above it (or a
    /// passing one at `max_kw`); falls back to bisection where predictions do not close in.
    #[default]
    Fast,
    /// The reference of the definition: steps of `step_kw` from 0 to the first failing step,
    /// then the largest passing multiple of `resolution_kw` below it.
    Stepped,
}

/// What to compute for each node.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CapacityOptions {
    /// Search method.
    pub method: SearchMethod,
    /// Also find the capacity under each criterion alone (voltage, thermal, voltage change,
    /// reverse flow), at the cost of more load flows.
    pub criteria_detail: bool,
}

impl Default for CapacityOptions {
    /// The fast search with the per-criterion capacities.
    fn default() -> CapacityOptions {
        CapacityOptions {
            method: SearchMethod::Fast,
            criteria_detail: true,
        }
    }
}

/// The hosting capacity of one node in one scenario.
#[derive(Debug, Clone, PartialEq)]
pub struct NodeCapacity {
    /// The node.
    pub bus: BusIdx,
    /// Hosting capacity, kW (a multiple of the resolution, at most `max_kw`).
    pub hosting_kw: f64,
    /// The criterion that binds first above the capacity.
    pub limit: Limit,
    /// Where it binds.
    pub element: Element,
    /// Node voltage without new generation, pu.
    pub v_base_pu: f64,
    /// Capacity under the voltage limits alone (over- and undervoltage), kW.
    pub hosting_kw_voltage: Option<f64>,
    /// Capacity under the thermal limits alone, kW.
    pub hosting_kw_thermal: Option<f64>,
    /// Capacity under the voltage-change limit alone, kW; `None` when that criterion is off.
    pub hosting_kw_change: Option<f64>,
    /// Capacity under the reverse-flow limit alone, kW; `None` when reverse flow is allowed.
    pub hosting_kw_reverse: Option<f64>,
    /// Load flows solved for this answer.
    pub load_flows: u32,
    /// Sweep iterations used by those load flows.
    pub sweep_iterations: u32,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Outcome {
    /// Converged; the bits of the violated criteria.
    Converged(u8),
    /// The load flow did not converge: a failure under every criterion.
    Failed,
}

impl Outcome {
    fn passes(self, subset: u8) -> bool {
        matches!(self, Outcome::Converged(mask) if mask & subset == 0)
    }
}

/// Solves injections at one node; every solve starts from the scenario's base case, so the
/// result at a given injection never depends on what was solved before (the fast and the
/// stepped search see the same numbers).
struct Evaluator<'s, 'f> {
    study: &'s FeederStudy<'f>,
    case: &'s ScenarioCase,
    bus: BusIdx,
    q_per_p: f64,
    resolution_kw: f64,
    max_steps: u64,
    work: FlowState,
    /// The last converged injection's solution, and its injection (pu).
    last: FlowState,
    last_p_pu: Option<f64>,
    /// Series impedance shared by each node's path to the head and the plant's path, pu: the
    /// voltage change at node i from a current I injected at the plant is ≈ Z_common(i)·I.
    common_r_pu: Vec<f64>,
    common_x_pu: Vec<f64>,
    outcomes: HashMap<u64, Outcome>,
    load_flows: u32,
    sweep_iterations: u32,
}

impl<'s, 'f> Evaluator<'s, 'f> {
    fn new(study: &'s FeederStudy<'f>, s: usize, bus: BusIdx) -> Evaluator<'s, 'f> {
        let case = &study.cases[s];
        let search = &study.study.search;
        // Nodes on the plant's path take their own path impedance; every other node takes that
        // of the point where its path leaves the plant's (its parent's value: parents come first).
        let n = study.feeder.n_nodes();
        let mut on_path = vec![false; n];
        for node in study.feeder.path_to_head(bus) {
            on_path[node.index()] = true;
        }
        let parents = study.network.parents();
        let mut common_r_pu = vec![0.0; n];
        let mut common_x_pu = vec![0.0; n];
        for i in 1..n {
            let from = if on_path[i] { i } else { parents[i] as usize };
            common_r_pu[i] = study.path_r_pu[from];
            common_x_pu[i] = study.path_x_pu[from];
        }
        Evaluator {
            study,
            case,
            bus,
            q_per_p: study.study.generation.q_per_p(),
            resolution_kw: search.resolution_kw,
            // The largest multiple of the resolution at most max_kw (guarding against
            // 20000 / 0.1 landing a hair below an integer).
            max_steps: (search.max_kw / search.resolution_kw + 1e-9).floor() as u64,
            work: case.base.clone(),
            last: case.base.clone(),
            last_p_pu: None,
            common_r_pu,
            common_x_pu,
            outcomes: HashMap::new(),
            load_flows: 0,
            sweep_iterations: 0,
        }
    }

    fn kw(&self, steps: u64) -> f64 {
        steps as f64 * self.resolution_kw
    }

    /// Solves the injection of `p_kw`; a converged solution is left in `self.last`.
    fn solve_at(&mut self, p_kw: f64) -> Outcome {
        let network = &self.study.network;
        let p_pu = network.kw_to_pu(p_kw);
        let injection = [Injection {
            bus: self.bus,
            p_pu,
            q_pu: p_pu * self.q_per_p,
        }];
        self.warm_start(p_pu);
        let settings = &self.study.solve_settings;
        let demand = &self.case.demand;
        let result = solve(network, demand, &injection, &mut self.work, settings);
        self.load_flows += 1;
        let outcome = match result {
            Ok(converged) => {
                self.sweep_iterations += converged.iterations;
                let (mut mask, near) = self.case.thresholds.violated(network, &self.work);
                if near {
                    // Some quantity sits within a hair of its threshold: settle the verdict on
                    // a tighter solution, so that it does not depend on where the solve started.
                    let tight = SolveSettings {
                        tol_pu: TIGHT_TOL_PU,
                        max_iterations: settings.max_iterations,
                    };
                    if let Ok(refined) = solve(network, demand, &injection, &mut self.work, &tight)
                    {
                        self.sweep_iterations += refined.iterations;
                        mask = self.case.thresholds.violated(network, &self.work).0;
                    }
                }
                std::mem::swap(&mut self.work, &mut self.last);
                self.last_p_pu = Some(p_pu);
                Outcome::Converged(mask)
            }
            Err(failed) => {
                self.sweep_iterations += failed.iterations;
                Outcome::Failed
            }
        };
        self.outcomes.insert(p_kw.to_bits(), outcome);
        outcome
    }

    /// Starts from the nearest solved injection (the base case or the last converged one) plus
    /// the linear voltage change of the difference: the injected current through the path
    /// impedance the plant shares with each node (superposition).
    fn warm_start(&mut self, p_pu: f64) {
        let (anchor, anchor_p_pu) = match self.last_p_pu {
            Some(last_p) if (p_pu - last_p).abs() < p_pu.abs() => (&self.last, last_p),
            _ => (&self.case.base, 0.0),
        };
        let base = &self.case.base;
        let k = self.bus.index();
        let (vr, vi) = (base.v_re()[k], base.v_im()[k]);
        let inv = 1.0 / (vr * vr + vi * vi);
        // Injected current conj(S / V) at the plant for S = Δp·(1 + j·q_per_p).
        let (dp, dq) = (p_pu - anchor_p_pu, (p_pu - anchor_p_pu) * self.q_per_p);
        let (ir, ii) = ((dp * vr + dq * vi) * inv, (dp * vi - dq * vr) * inv);
        let (common_r, common_x) = (&self.common_r_pu, &self.common_x_pu);
        self.work.set_voltages(|i| {
            let (r, x) = (common_r[i], common_x[i]);
            (
                anchor.v_re()[i] + r * ir - x * ii,
                anchor.v_im()[i] + r * ii + x * ir,
            )
        });
    }

    /// The outcome at `p_kw`, solved once.
    fn outcome(&mut self, p_kw: f64) -> Outcome {
        match self.outcomes.get(&p_kw.to_bits()) {
            Some(&outcome) => outcome,
            None => self.solve_at(p_kw),
        }
    }

    /// Solves at `p_kw` and captures what the criteria see (`None`: no solution).
    fn point(&mut self, p_kw: f64) -> (Outcome, Option<Snapshot>) {
        let outcome = self.solve_at(p_kw);
        let snapshot = match outcome {
            Outcome::Converged(_) => Some(Snapshot::capture(&self.study.network, &self.last)),
            Outcome::Failed => None,
        };
        (outcome, snapshot)
    }

    /// First estimate of where `subset` binds, pu, from the base case and the path impedance:
    /// ΔV ≈ (R·P + X·Q)/V at the node (and its whole subtree), and the change of every branch
    /// current on the path to the head.
    fn first_estimate_pu(&self, subset: u8) -> f64 {
        let k = self.bus.index();
        let case = self.case;
        let base = &case.snapshot;
        let thresholds = &case.thresholds;
        let (r, x) = (self.study.path_r_pu[k], self.study.path_x_pu[k]);
        let v0 = base.v_pu[k];
        let rise_per_pu = (r + x * self.q_per_p) / v0;
        let qpp = self.q_per_p;
        // The node's Thévenin equivalent (base voltage behind the path impedance) with the
        // plant at its end is the two-bus system: solved exactly for the target voltage.
        let mut best = f64::INFINITY;
        if subset & OVER != 0 && rise_per_pu > 0.0 {
            let target = v0 + case.subtree_ov_headroom[k];
            best = best.min(two_bus_p_for_voltage(v0, target, r, x, qpp));
        }
        if subset & UNDER != 0 && rise_per_pu < 0.0 {
            let target = v0 - case.subtree_uv_headroom[k];
            best = best.min(two_bus_p_for_voltage(v0, target, r, x, qpp));
        }
        if subset & CHANGE != 0 && thresholds.change_pu.is_finite() && rise_per_pu != 0.0 {
            let target = v0 + thresholds.change_pu.copysign(rise_per_pu);
            best = best.min(two_bus_p_for_voltage(v0, target, r, x, qpp));
        }
        if subset & THERMAL != 0 {
            // Current injected per pu of P: conj(S / V) with S = 1 + j·q_per_p.
            let (vr, vi) = (case.base.v_re()[k], case.base.v_im()[k]);
            let inv = 1.0 / (vr * vr + vi * vi);
            let (ur, ui) = (
                (vr + self.q_per_p * vi) * inv,
                (vi - self.q_per_p * vr) * inv,
            );
            let u2 = ur * ur + ui * ui;
            let mut at = k;
            while at != 0 {
                // |J0 − s·u| = limit: s²|u|² − 2s·Re(J0·conj u) + |J0|² − limit² = 0; the limit
                // is above |J0| by construction, so there is one positive root.
                let (jr, ji) = (case.base.j_re()[at], case.base.j_im()[at]);
                let a = jr * ur + ji * ui;
                let c = jr * jr + ji * ji - thresholds.th[at] * thresholds.th[at];
                let s = (a + (a * a - u2 * c).max(0.0).sqrt()) / u2;
                best = best.min(s);
                at = self.study.network.parents()[at] as usize;
            }
        }
        if subset & REVERSE != 0 && thresholds.head_p_min_pu > f64::NEG_INFINITY {
            best = best.min((base.head_p_pu - thresholds.head_p_min_pu).max(0.0));
        }
        best
    }

    /// The fast search for `subset` from a known pass at `lo` (with its snapshot and an earlier
    /// passing point to extrapolate from) and, optionally, a known failure at `hi`. Returns the
    /// capacity in resolutions and the snapshots of the final pass and fail.
    fn fast(&mut self, subset: u8, start: FastStart) -> FastAnswer {
        let FastStart {
            mut lo,
            mut lo_snap,
            mut below,
            mut hi,
        } = start;
        let to_steps = 1000.0 / self.resolution_kw; // pu → resolutions (1 MVA base)
        // Evaluations made while the answer was bracketed; past a few, predictions are not
        // closing in (a kink in the criteria, or no solution above) and bisection takes over.
        let mut bracketed_evaluations = 0;
        loop {
            let upper = hi.as_ref().map_or(self.max_steps + 1, |(h, _)| *h);
            if lo >= self.max_steps || upper == lo + 1 {
                return FastAnswer { lo, lo_snap, hi };
            }
            let predicted_pu = match (&hi, &below) {
                // Interpolate between the pass and a solved failure.
                (Some((h, Some(h_snap))), _) => self.predict(subset, (lo, &lo_snap), (*h, h_snap)),
                // Extrapolate from the last two passes.
                (_, Some((b, b_snap))) => self.predict(subset, (*b, b_snap), (lo, &lo_snap)),
                (_, None) => self.first_estimate_pu(subset),
            };
            let predicted = predicted_pu * to_steps;
            let mut steps =
                if bracketed_evaluations >= MAX_PREDICTED_IN_BRACKET || predicted.is_nan() {
                    lo + (upper - lo) / 2
                } else if predicted >= self.max_steps as f64 {
                    self.max_steps
                } else {
                    // Just below the predicted crossing: expected to pass, so that the next
                    // evaluation one resolution up can close the bracket.
                    predicted.max(0.0).floor() as u64
                };
            steps = steps.clamp(lo + 1, upper - 1);
            if hi.is_some() {
                bracketed_evaluations += 1;
            }
            let (outcome, snapshot) = self.point(self.kw(steps));
            if outcome.passes(subset) {
                let snap = snapshot.expect("a passing injection has converged");
                below = Some((lo, std::mem::replace(&mut lo_snap, snap)));
                lo = steps;
            } else {
                hi = Some((steps, snapshot));
            }
        }
    }

    fn predict(&self, subset: u8, a: (u64, &Snapshot), b: (u64, &Snapshot)) -> f64 {
        let pu_per_step = self.resolution_kw / 1000.0;
        predict_crossing_pu(
            &self.case.thresholds,
            subset,
            &self.case.snapshot,
            (a.0 as f64 * pu_per_step, a.1),
            (b.0 as f64 * pu_per_step, b.1),
        )
    }

    /// The smallest step (`step_kw` multiple) above `steps` resolutions already known to fail
    /// under every criterion together; infinite when none is.
    fn first_failing_kw(&self, steps: u64) -> f64 {
        let step_kw = self.study.study.search.step_kw;
        let above = self.kw(steps);
        let mut i = (above / step_kw).floor() as u64 + 1;
        loop {
            let p_kw = i as f64 * step_kw;
            match self.outcomes.get(&p_kw.to_bits()) {
                Some(outcome) if !outcome.passes(ALL) => return p_kw,
                Some(_) => i += 1,
                None => return f64::INFINITY,
            }
        }
    }

    /// The stepped reference for `subset`, in resolutions.
    fn stepped(&mut self, subset: u8) -> u64 {
        let step_kw = self.study.study.search.step_kw;
        let max_kw = self.kw(self.max_steps);
        let mut first_failing_kw = None;
        for i in 1u64.. {
            let p_kw = i as f64 * step_kw;
            if p_kw > max_kw {
                break;
            }
            if !self.outcome(p_kw).passes(subset) {
                first_failing_kw = Some(p_kw);
                break;
            }
        }
        let top_kw = match first_failing_kw {
            Some(p_kw) => p_kw,
            None if self.outcome(max_kw).passes(subset) => return self.max_steps,
            None => max_kw,
        };
        // The largest passing multiple of the resolution below the first failure.
        let mut steps = ((top_kw / self.resolution_kw) - 1e-9).ceil() as u64;
        while steps > 0 {
            steps -= 1;
            if steps == 0 || self.outcome(self.kw(steps)).passes(subset) {
                return steps;
            }
        }
        0
    }
}

/// Tolerance of the second solve that settles a verdict when a quantity lies within
/// [`crate::criteria::NEAR_PU`] of its threshold, pu. Solutions reached from different starting
/// points agree far closer than that margin, so verdicts do not depend on the search path.
const TIGHT_TOL_PU: f64 = 1e-12;

/// Predicted evaluations allowed once the answer is bracketed, before bisecting.
const MAX_PREDICTED_IN_BRACKET: u32 = 4;

/// The smallest positive injection P (pu, with Q = P·`q_per_p`) that brings the far end of a
/// line r + jx from a stiff source at `vs` to the voltage `vr`: the two-bus quartic
/// V_r⁴ − (V_s² + 2(rP + xQ))·V_r² + (P² + Q²)(r² + x²) = 0 solved for P. Infinite when no
/// injection reaches `vr` (the nose of the curve lies below it).
fn two_bus_p_for_voltage(vs: f64, vr: f64, r: f64, x: f64, q_per_p: f64) -> f64 {
    let a = (r * r + x * x) * (1.0 + q_per_p * q_per_p);
    let b = -2.0 * (r + x * q_per_p) * vr * vr;
    let c = vr.powi(4) - vs * vs * vr * vr;
    let disc = b * b - 4.0 * a * c;
    if a <= 0.0 || disc < 0.0 {
        return f64::INFINITY;
    }
    let root = disc.sqrt();
    [(-b - root) / (2.0 * a), (-b + root) / (2.0 * a)]
        .into_iter()
        .filter(|p| *p > 0.0)
        .fold(f64::INFINITY, f64::min)
}

struct FastStart {
    lo: u64,
    lo_snap: Snapshot,
    below: Option<(u64, Snapshot)>,
    hi: Option<(u64, Option<Snapshot>)>,
}

struct FastAnswer {
    lo: u64,
    lo_snap: Snapshot,
    hi: Option<(u64, Option<Snapshot>)>,
}

impl FeederStudy<'_> {
    /// The hosting capacity of `bus` in scenario `s` (an index into the study's scenarios).
    ///
    /// # Panics
    /// When `s` or `bus` is out of range.
    pub fn node_capacity(&self, s: usize, bus: BusIdx, options: &CapacityOptions) -> NodeCapacity {
        let case = &self.cases[s];
        let limits = &self.study.limits;
        let change_on = limits.voltage_change_pct > 0.0;
        let reverse_on = limits.reverse_flow == headroom_model::ReverseFlow::Forbid;
        let v_base_pu = case.snapshot.v_pu[bus.index()];
        if case.base_result.is_err() {
            return NodeCapacity {
                bus,
                hosting_kw: 0.0,
                limit: Limit::NotConverged,
                element: Element::None,
                v_base_pu: f64::NAN,
                hosting_kw_voltage: Some(0.0),
                hosting_kw_thermal: Some(0.0),
                hosting_kw_change: change_on.then_some(0.0),
                hosting_kw_reverse: reverse_on.then_some(0.0),
                load_flows: 0,
                sweep_iterations: 0,
            };
        }
        let mut eval = Evaluator::new(self, s, bus);
        let detail_subsets = [
            (OVER | UNDER, true),
            (THERMAL, true),
            (CHANGE, change_on),
            (REVERSE, reverse_on),
        ];
        let mut detail = [None; 4];

        let (steps, pass_snap, fail) = match options.method {
            SearchMethod::Fast => {
                let answer = eval.fast(
                    ALL,
                    FastStart {
                        lo: 0,
                        lo_snap: case.snapshot.clone(),
                        below: None,
                        hi: None,
                    },
                );
                if options.criteria_detail {
                    for (slot, &(subset, on)) in detail.iter_mut().zip(&detail_subsets) {
                        if !on {
                            continue;
                        }
                        let steps = match &answer.hi {
                            // Capacity at max_kw, or no solution a resolution above it: the
                            // same under every criterion alone.
                            None | Some((_, None)) => answer.lo,
                            Some((h, Some(h_snap))) => {
                                if !eval.outcome(eval.kw(*h)).passes(subset) {
                                    answer.lo
                                } else {
                                    eval.fast(
                                        subset,
                                        FastStart {
                                            lo: *h,
                                            lo_snap: h_snap.clone(),
                                            below: Some((answer.lo, answer.lo_snap.clone())),
                                            hi: None,
                                        },
                                    )
                                    .lo
                                }
                            }
                        };
                        *slot = Some(eval.kw(steps));
                    }
                }
                (
                    answer.lo,
                    Some(answer.lo_snap),
                    answer.hi.map(|(_, snap)| snap),
                )
            }
            SearchMethod::Stepped => {
                let steps = eval.stepped(ALL);
                if options.criteria_detail {
                    for (slot, &(subset, on)) in detail.iter_mut().zip(&detail_subsets) {
                        if on {
                            let steps = eval.stepped(subset);
                            *slot = Some(eval.kw(steps));
                        }
                    }
                }
                if steps >= eval.max_steps {
                    (steps, None, None)
                } else {
                    let pass_snap = if steps == 0 {
                        case.snapshot.clone()
                    } else {
                        eval.point(eval.kw(steps))
                            .1
                            .expect("a passing injection has converged")
                    };
                    // The first failing injection above the answer: one resolution up, or the
                    // failing step itself when steps are not multiples of the resolution.
                    let fail_kw = eval.kw(steps + 1).min(eval.first_failing_kw(steps));
                    (steps, Some(pass_snap), Some(eval.point(fail_kw).1))
                }
            }
        };

        let (limit, element) = match (fail, pass_snap) {
            (None, _) | (_, None) => (Limit::SearchMax, Element::None),
            (Some(None), _) => (Limit::NotConverged, Element::None),
            (Some(Some(fail_snap)), Some(pass_snap)) => first_crossing(
                &case.thresholds,
                ALL,
                &case.snapshot,
                &pass_snap,
                &fail_snap,
            )
            .unwrap_or((Limit::NotConverged, Element::None)),
        };
        NodeCapacity {
            bus,
            hosting_kw: eval.kw(steps),
            limit,
            element,
            v_base_pu,
            hosting_kw_voltage: detail[0],
            hosting_kw_thermal: detail[1],
            hosting_kw_change: detail[2],
            hosting_kw_reverse: detail[3],
            load_flows: eval.load_flows,
            sweep_iterations: eval.sweep_iterations,
        }
    }
}
