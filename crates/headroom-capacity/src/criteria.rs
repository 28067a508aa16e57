//! The criteria of the hosting-capacity definition: limits in per unit, the per-element
//! thresholds ("beyond the limit and worse than at P = 0"), and which (criterion, element)
//! crosses first.

use headroom_flow::{FlowState, Network};
use headroom_model::{BranchIdx, BusIdx, Feeder, Limits, ReverseFlow};

/// What ends the hosting capacity of a node.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Limit {
    /// Some node voltage above `v_max_pu` (and higher than without the plant).
    Overvoltage,
    /// Some node voltage below `v_min_pu` (and lower than without the plant).
    Undervoltage,
    /// Some branch current above its rating × `thermal_pct` (and higher than without the plant).
    Thermal,
    /// Some node voltage would move by more than `voltage_change_pct` if the plant tripped.
    VoltageChange,
    /// Active power would flow out of the feeder at the head, when that is forbidden.
    ReverseFlow,
    /// The load flow has no solution (voltage collapse) or did not converge.
    NotConverged,
    /// Nothing binds up to the search's `max_kw`.
    SearchMax,
}

impl Limit {
    /// Every limit, in the order near-ties are broken.
    pub const ALL: [Limit; 7] = [
        Limit::Overvoltage,
        Limit::Undervoltage,
        Limit::Thermal,
        Limit::VoltageChange,
        Limit::ReverseFlow,
        Limit::NotConverged,
        Limit::SearchMax,
    ];

    /// The name used in output tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Limit::Overvoltage => "overvoltage",
            Limit::Undervoltage => "undervoltage",
            Limit::Thermal => "thermal",
            Limit::VoltageChange => "voltage_change",
            Limit::ReverseFlow => "reverse_flow",
            Limit::NotConverged => "not_converged",
            Limit::SearchMax => "search_max",
        }
    }

    /// A short label for people, e.g. `voltage change on trip`.
    pub fn label(self) -> &'static str {
        match self {
            Limit::Overvoltage => "overvoltage",
            Limit::Undervoltage => "undervoltage",
            Limit::Thermal => "thermal",
            Limit::VoltageChange => "voltage change on trip",
            Limit::ReverseFlow => "reverse power",
            Limit::NotConverged => "no convergence",
            Limit::SearchMax => "search ceiling",
        }
    }

    /// The limit named as in output tables (`voltage_change`); `None` for anything else.
    pub fn parse(name: &str) -> Option<Limit> {
        Limit::ALL.into_iter().find(|l| l.as_str() == name)
    }
}

impl std::fmt::Display for Limit {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Where a criterion binds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Element {
    /// Nowhere in particular (`not_converged`, `search_max`).
    None,
    /// A node (voltage criteria).
    Node(BusIdx),
    /// A branch (thermal).
    Branch(BranchIdx),
    /// The head node (reverse flow).
    Head,
}

impl Element {
    /// The node or branch id as written in the feeder files; `None` for [`Element::None`].
    pub fn id<'f>(&self, feeder: &'f Feeder) -> Option<&'f str> {
        match *self {
            Element::None => None,
            Element::Node(bus) => Some(&feeder.node(bus).id),
            Element::Branch(branch) => Some(&feeder.branch(branch).id),
            Element::Head => Some(&feeder.node(BusIdx::HEAD).id),
        }
    }
}

/// A criterion beyond its limit at one element (used for baseline problems).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Violation {
    /// Which criterion.
    pub limit: Limit,
    /// Where.
    pub element: Element,
    /// The quantity: voltage in pu, current in A, head power in kW.
    pub value: f64,
    /// The limit it is beyond, same unit.
    pub threshold: f64,
}

pub(crate) const OVER: u8 = 1;
pub(crate) const UNDER: u8 = 2;
pub(crate) const THERMAL: u8 = 4;
pub(crate) const CHANGE: u8 = 8;
pub(crate) const REVERSE: u8 = 16;
/// Every criterion (convergence is always judged).
pub(crate) const ALL: u8 = OVER | UNDER | THERMAL | CHANGE | REVERSE;

/// "Worse than at P = 0" must exceed the base value by more than this, so that the rounding of a
/// converged load flow (tolerance 1e-9 pu) is not taken for a deepened violation. Per unit of
/// voltage, current (1 MVA base) and power alike.
pub(crate) const WORSE_EPS_PU: f64 = 1e-8;

/// A quantity closer than this to its threshold (pu) gets its verdict settled on a tighter
/// load flow.
pub(crate) const NEAR_PU: f64 = 1e-8;

/// What one solved injection looks like to the criteria (no nodes by default).
#[derive(Debug, Clone, Default)]
pub(crate) struct Snapshot {
    /// Voltage magnitude per node, pu.
    pub v_pu: Vec<f64>,
    /// Feeding-branch current magnitude per node, pu (0 at the head).
    pub i_pu: Vec<f64>,
    /// Active power from the head into the feeder, pu.
    pub head_p_pu: f64,
    /// How far the voltages may be from the converged solution's, pu (0: not bounded here).
    pub error_v_pu: f64,
    /// How far the currents and the head power may be from the converged solution's, pu.
    pub error_flow_pu: f64,
    /// Criteria that [`Thresholds::judge`] found violated nowhere (0 when not judged).
    pub clean: u8,
}

impl Snapshot {
    /// What the criteria see in a solved state (the base case; the searches fill theirs while
    /// judging, see [`Thresholds::judge`]).
    pub fn capture(state: &FlowState) -> Snapshot {
        let (v_re, v_im) = (state.v_re(), state.v_im());
        let (j_re, j_im) = (state.j_re(), state.j_im());
        // sqrt of the sum of squares: no overflow is possible at per-unit magnitudes, and it is
        // several times faster than hypot (and what judge computes).
        let magnitude = |re: &[f64], im: &[f64]| -> Vec<f64> {
            re.iter()
                .zip(im)
                .map(|(r, i)| (r * r + i * i).sqrt())
                .collect()
        };
        let mut i_pu = magnitude(j_re, j_im);
        i_pu[0] = 0.0;
        Snapshot {
            v_pu: magnitude(v_re, v_im),
            i_pu,
            head_p_pu: head_p_pu(state),
            error_v_pu: 0.0,
            error_flow_pu: 0.0,
            clean: 0,
        }
    }

    /// Records how far the judged state may be from the converged solution: per unit of the
    /// last sweep's change, (voltages, flows), times that change.
    pub(crate) fn set_error_bounds(&mut self, (per_v, per_flow): (f64, f64), change_pu: f64) {
        self.error_v_pu = per_v * change_pu;
        self.error_flow_pu = per_flow * change_pu;
    }
}

/// Active power from the head node into its branches, pu (the solve leaves the current
/// they draw in the head's slot).
pub(crate) fn head_p_pu(state: &FlowState) -> f64 {
    state.v_re()[0] * state.j_re()[0] + state.v_im()[0] * state.j_im()[0]
}

/// Per-element thresholds of one scenario, in per unit.
#[derive(Debug, Clone)]
pub(crate) struct Thresholds {
    /// Overvoltage when |V| > ov.
    pub ov: Vec<f64>,
    /// Undervoltage when |V| < uv.
    pub uv: Vec<f64>,
    /// Largest voltage change, pu (infinite when the criterion is off).
    pub change_pu: f64,
    /// Thermal when |I| > th (infinite at the head).
    pub th: Vec<f64>,
    /// Reverse flow when head P < this (−∞ when allowed).
    pub head_p_min_pu: f64,
    /// Node voltages without the plant, pu: with the limits below, the voltage scan derives
    /// every voltage threshold from this one array.
    v0: Vec<f64>,
    v_max_pu: f64,
    v_min_pu: f64,
}

/// Nodes judged together by [`Thresholds::judge`].
const LANES: usize = 4;

/// How far a solved state's quantities are from their thresholds, pu.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Margins {
    /// Smallest distance of any node voltage (or its change) to its thresholds.
    pub voltage_pu: f64,
    /// Smallest distance of any branch current to its thermal threshold, or of the head's
    /// power to its reverse-flow threshold (1 MVA base).
    pub flow_pu: f64,
    /// The lowest node voltage, pu.
    pub lowest_v_pu: f64,
}

impl Margins {
    /// The smallest of all.
    pub fn least_pu(self) -> f64 {
        self.voltage_pu.min(self.flow_pu)
    }
}

/// How far a node's voltage `v` (its base voltage `base`) is beyond its overvoltage and
/// undervoltage thresholds and its change beyond the change limit, pu (> 0: violated), under
/// the limits `[v_max, v_min, change]`: the arithmetic of [`Thresholds::judge`] for one node.
#[inline(always)]
fn voltage_excess(v: f64, base: f64, [v_max, v_min, change]: [f64; 3]) -> [f64; 3] {
    let hi = base + WORSE_EPS_PU;
    let lo = base - WORSE_EPS_PU;
    let ov = if v_max > hi { v_max } else { hi };
    let uv = if v_min < lo { v_min } else { lo };
    // The change beyond its limit, either way: |d| − limit is exactly the larger of d − limit
    // and −d − limit, and its magnitude the nearer of the two to 0.
    [v - ov, uv - v, (v - base).abs() - change]
}

/// The distance to the nearest of a node's voltage thresholds, from [`voltage_excess`].
#[inline(always)]
fn nearest_voltage_threshold([a, b, cc]: [f64; 3]) -> f64 {
    let (aa, ba, ca) = (a.abs(), b.abs(), cc.abs());
    let ab = if aa < ba { aa } else { ba };
    if ab < ca { ab } else { ca }
}

/// Running results of [`Thresholds::judge`], one accumulator per lane: a max or min reduction
/// is not reordered by the compiler, so separate lanes are what lets it use vector registers.
struct Scan {
    v_max: f64,
    v_min: f64,
    change: f64,
    /// Largest excess over each criterion's threshold (> 0 is a violation).
    over: [f64; LANES],
    under: [f64; LANES],
    moved: [f64; LANES],
    thermal: [f64; LANES],
    /// Smallest distance of any voltage to its thresholds.
    margin_v: [f64; LANES],
    /// Smallest distance of any current to its threshold.
    margin_i: [f64; LANES],
    /// Lowest voltage.
    lowest_v: [f64; LANES],
}

impl Scan {
    fn new(v_max: f64, v_min: f64, change: f64) -> Scan {
        Scan {
            v_max,
            v_min,
            change,
            over: [f64::MIN; LANES],
            under: [f64::MIN; LANES],
            moved: [f64::MIN; LANES],
            thermal: [f64::MIN; LANES],
            margin_v: [f64::INFINITY; LANES],
            margin_i: [f64::INFINITY; LANES],
            lowest_v: [f64::INFINITY; LANES],
        }
    }

    /// Judges `LANES` nodes from their voltages `[re, im]`, feeding-branch currents, base
    /// voltages and thermal thresholds; returns their voltage and current magnitudes. Plain
    /// comparisons rather than f64::max and min keep it branch-free. At the head the thermal
    /// threshold is infinite: its excess is −∞ and its distance +∞, never taken.
    #[inline(always)]
    fn visit(
        &mut self,
        [vr, vi]: [[f64; LANES]; 2],
        [jr, ji]: [[f64; LANES]; 2],
        base: [f64; LANES],
        rating: [f64; LANES],
    ) -> ([f64; LANES], [f64; LANES]) {
        let mut v = [0.0; LANES];
        let mut current = [0.0; LANES];
        for l in 0..LANES {
            v[l] = (vr[l] * vr[l] + vi[l] * vi[l]).sqrt();
            current[l] = (jr[l] * jr[l] + ji[l] * ji[l]).sqrt();
            let [a, b, cc] = voltage_excess(v[l], base[l], [self.v_max, self.v_min, self.change]);
            let e = current[l] - rating[l];
            self.over[l] = if a > self.over[l] { a } else { self.over[l] };
            self.under[l] = if b > self.under[l] { b } else { self.under[l] };
            self.moved[l] = if cc > self.moved[l] {
                cc
            } else {
                self.moved[l]
            };
            self.thermal[l] = if e > self.thermal[l] {
                e
            } else {
                self.thermal[l]
            };
            let near = nearest_voltage_threshold([a, b, cc]);
            let ea = e.abs();
            self.margin_v[l] = if near < self.margin_v[l] {
                near
            } else {
                self.margin_v[l]
            };
            self.margin_i[l] = if ea < self.margin_i[l] {
                ea
            } else {
                self.margin_i[l]
            };
            self.lowest_v[l] = if v[l] < self.lowest_v[l] {
                v[l]
            } else {
                self.lowest_v[l]
            };
        }
        (v, current)
    }
}

impl Thresholds {
    pub fn new(feeder: &Feeder, network: &Network, limits: &Limits, base: &Snapshot) -> Thresholds {
        let n = feeder.n_nodes();
        let change_pu = if limits.voltage_change_pct > 0.0 {
            limits.voltage_change_pct / 100.0
        } else {
            f64::INFINITY
        };
        let mut t = Thresholds {
            ov: Vec::with_capacity(n),
            uv: Vec::with_capacity(n),
            change_pu,
            th: Vec::with_capacity(n),
            head_p_min_pu: match limits.reverse_flow {
                ReverseFlow::Allow => f64::NEG_INFINITY,
                ReverseFlow::Forbid => (base.head_p_pu - WORSE_EPS_PU).min(0.0),
            },
            v0: base.v_pu.clone(),
            v_max_pu: limits.v_max_pu,
            v_min_pu: limits.v_min_pu,
        };
        for i in 0..n {
            t.ov.push(t.ov_at(i));
            t.uv.push(t.uv_at(i));
            let th = if i == 0 {
                f64::INFINITY
            } else {
                let rating_pu = feeder.branches()[i - 1].rating_a / network.i_base_a();
                (rating_pu * limits.thermal_pct / 100.0).max(base.i_pu[i] + WORSE_EPS_PU)
            };
            t.th.push(th);
        }
        t
    }

    /// Overvoltage threshold of node `i`: the limit, or a hair above the base voltage.
    #[inline(always)]
    fn ov_at(&self, i: usize) -> f64 {
        self.v_max_pu.max(self.v0[i] + WORSE_EPS_PU)
    }

    /// Undervoltage threshold of node `i`: the limit, or a hair below the base voltage.
    #[inline(always)]
    fn uv_at(&self, i: usize) -> f64 {
        self.v_min_pu.min(self.v0[i] - WORSE_EPS_PU)
    }

    /// Replaces the thermal limit of the branch feeding node `i` by `limit_pu` (a what-if
    /// rating), kept above the base-case current `base_i_pu` as every thermal threshold is.
    pub(crate) fn set_thermal_limit_pu(&mut self, i: usize, limit_pu: f64, base_i_pu: f64) {
        debug_assert!(i > 0, "the head has no feeding branch");
        self.th[i] = limit_pu.max(base_i_pu + WORSE_EPS_PU);
    }

    /// How far node `i`'s voltage in `state` is from the nearest of its thresholds, pu: the
    /// very number [`Thresholds::judge`] takes for that node, so that the judge's
    /// [`Margins::voltage_pu`] is at most this.
    pub fn node_voltage_margin_pu(&self, state: &FlowState, i: usize) -> f64 {
        let (vr, vi) = (state.v_re()[i], state.v_im()[i]);
        let v = (vr * vr + vi * vi).sqrt();
        let limits = [self.v_max_pu, self.v_min_pu, self.change_pu];
        nearest_voltage_threshold(voltage_excess(v, self.v0[i], limits))
    }

    /// Which criteria (bits) the solved state violates, and how far the quantities are from
    /// their thresholds; `seen` is filled with what the criteria see in that state.
    /// Convergence is judged by the caller.
    pub fn judge(&self, state: &FlowState, seen: &mut Snapshot) -> (u8, Margins) {
        let n = state.n_nodes();
        let (v_re, v_im) = (&state.v_re()[..n], &state.v_im()[..n]);
        let (j_re, j_im) = (&state.j_re()[..n], &state.j_im()[..n]);
        let (v0, th) = (&self.v0[..n], &self.th[..n]);
        let (v_out, i_out) = (&mut seen.v_pu[..n], &mut seen.i_pu[..n]);
        // Largest excess over each criterion's threshold (> 0 is a violation) and the smallest
        // distance to any threshold, in one pass over the state. Plain comparisons rather than
        // f64::max and min keep the loop branch-free, and one accumulator per lane lets it run
        // in vector registers (a max or min reduction is not reordered by the compiler). At
        // the head the thermal threshold is infinite: its excess is −∞ and its distance +∞,
        // never taken.
        let mut acc = Scan::new(self.v_max_pu, self.v_min_pu, self.change_pu);
        let whole = n - n % LANES;
        let lanes = |x: &[f64], start: usize| -> [f64; LANES] {
            x[start..start + LANES].try_into().expect("a whole chunk")
        };
        for start in (0..whole).step_by(LANES) {
            let (v, current) = acc.visit(
                [lanes(v_re, start), lanes(v_im, start)],
                [lanes(j_re, start), lanes(j_im, start)],
                lanes(v0, start),
                lanes(th, start),
            );
            v_out[start..start + LANES].copy_from_slice(&v);
            i_out[start..start + LANES].copy_from_slice(&current);
        }
        for i in whole..n {
            // The last few nodes in lane 0, the other lanes idle (a node at its base voltage
            // with no current and no rating is never beyond or near anything).
            let one = |x: f64, idle: f64| {
                let mut out = [idle; LANES];
                out[0] = x;
                out
            };
            let (v, current) = acc.visit(
                [one(v_re[i], 1.0), one(v_im[i], 0.0)],
                [one(j_re[i], 0.0), one(j_im[i], 0.0)],
                one(v0[i], 1.0),
                one(th[i], f64::INFINITY),
            );
            v_out[i] = v[0];
            i_out[i] = current[0];
        }
        let Scan {
            over,
            under,
            moved,
            thermal,
            margin_v,
            margin_i,
            lowest_v,
            ..
        } = acc;
        let largest = |lanes: [f64; LANES]| lanes.into_iter().fold(f64::MIN, f64::max);
        let (over, under, moved, thermal) = (
            largest(over),
            largest(under),
            largest(moved),
            largest(thermal),
        );
        let smallest = |lanes: [f64; LANES]| lanes.into_iter().fold(f64::INFINITY, f64::min);
        let mut margins = Margins {
            voltage_pu: smallest(margin_v),
            flow_pu: smallest(margin_i),
            lowest_v_pu: smallest(lowest_v),
        };
        i_out[0] = 0.0;
        let head_p = head_p_pu(state);
        seen.head_p_pu = head_p;
        let mut mask = (u8::from(over > 0.0) * OVER)
            | (u8::from(under > 0.0) * UNDER)
            | (u8::from(moved > 0.0) * CHANGE)
            | (u8::from(thermal > 0.0) * THERMAL);
        if self.head_p_min_pu > f64::NEG_INFINITY {
            if head_p < self.head_p_min_pu {
                mask |= REVERSE;
            }
            margins.flow_pu = margins.flow_pu.min((head_p - self.head_p_min_pu).abs());
        }
        seen.clean = ALL & !mask;
        (mask, margins)
    }

    /// Every (criterion, element) of `subset` in "upper" form: (limit, element, quantity,
    /// threshold), violated when quantity > threshold.
    pub fn for_each_quantity(
        &self,
        subset: u8,
        base: &Snapshot,
        at: &Snapshot,
        mut visit: impl FnMut(Limit, Element, f64, f64),
    ) {
        self.for_each_pair(
            subset,
            base,
            [at, at],
            |limit, element, [q, _], threshold| visit(limit, element, q, threshold),
        );
    }

    /// Every (criterion, element) of `subset` in "upper" form at two snapshots: (limit,
    /// element, quantities, threshold), violated when a quantity > threshold.
    pub fn for_each_pair(
        &self,
        subset: u8,
        base: &Snapshot,
        [a, b]: [&Snapshot; 2],
        mut visit: impl FnMut(Limit, Element, [f64; 2], f64),
    ) {
        let n = a.v_pu.len();
        if subset & OVER != 0 {
            for i in 0..n {
                visit(
                    Limit::Overvoltage,
                    node(i),
                    [a.v_pu[i], b.v_pu[i]],
                    self.ov[i],
                );
            }
        }
        if subset & UNDER != 0 {
            for i in 0..n {
                visit(
                    Limit::Undervoltage,
                    node(i),
                    [-a.v_pu[i], -b.v_pu[i]],
                    -self.uv[i],
                );
            }
        }
        if subset & THERMAL != 0 {
            for i in 1..n {
                visit(
                    Limit::Thermal,
                    Element::Branch(BranchIdx::new(i as u32 - 1)),
                    [a.i_pu[i], b.i_pu[i]],
                    self.th[i],
                );
            }
        }
        if subset & CHANGE != 0 && self.change_pu.is_finite() {
            for i in 0..n {
                let change = |at: &Snapshot| (at.v_pu[i] - base.v_pu[i]).abs();
                visit(
                    Limit::VoltageChange,
                    node(i),
                    [change(a), change(b)],
                    self.change_pu,
                );
            }
        }
        if subset & REVERSE != 0 && self.head_p_min_pu > f64::NEG_INFINITY {
            visit(
                Limit::ReverseFlow,
                Element::Head,
                [-a.head_p_pu, -b.head_p_pu],
                -self.head_p_min_pu,
            );
        }
    }
}

fn node(i: usize) -> Element {
    Element::Node(BusIdx::new(i as u32))
}

/// Fractions closer than this (of the last step) count as a tie, broken by criterion order.
const TIE_FRACTION: f64 = 1e-3;

/// Among the (criterion, element) pairs of `subset` violated at `fail` but not at `pass`, the one
/// whose quantity crosses its threshold first on the straight line from `pass` to `fail`;
/// near-ties go to the order of [`Limit::ALL`], then to the lower element index. With it,
/// whether that choice could come out otherwise on the converged solutions: some comparison
/// lies closer to the edge of a tie than the snapshots' error bounds allow for.
pub(crate) fn first_crossing(
    thresholds: &Thresholds,
    subset: u8,
    base: &Snapshot,
    pass: &Snapshot,
    fail: &Snapshot,
) -> Option<(Limit, Element, bool)> {
    // (crossing fraction, its uncertainty, criterion, element)
    let mut best: Option<(f64, f64, Limit, Element)> = None;
    let mut doubtful = false;
    // A criterion violated nowhere at `fail` has nothing to offer (its mask bit and the test
    // below compare the same numbers).
    let subset = subset & !fail.clean;
    let pair = [pass, fail];
    let error_v = pass.error_v_pu.max(fail.error_v_pu);
    let error_flow = pass.error_flow_pu.max(fail.error_flow_pu);
    thresholds.for_each_pair(
        subset,
        base,
        pair,
        |limit, element, [q_pass, q_fail], threshold| {
            if q_fail <= threshold {
                return;
            }
            // Crossing fraction along pass → fail; a pair already beyond at `pass` crosses at 0.
            let t = if q_pass >= threshold || q_fail == q_pass {
                0.0
            } else {
                ((threshold - q_pass) / (q_fail - q_pass)).clamp(0.0, 1.0)
            };
            let error = match limit {
                Limit::Thermal | Limit::ReverseFlow => error_flow,
                _ => error_v,
            };
            // Moving q_pass and q_fail by up to `error` each moves the fraction by
            // (−(1 − t)·Δq_pass − t·Δq_fail) / (q_fail − q_pass + Δq_fail − Δq_pass), so by at
            // most this (unbounded when the two may not be told apart).
            let spread = q_fail - q_pass - 2.0 * error;
            let uncertainty = if spread > 0.0 {
                error / spread
            } else {
                f64::INFINITY
            };
            let better = match best {
                None => true,
                Some((t_best, u_best, limit_best, element_best)) => {
                    // How much farther from the edge of a tie than the fractions may be off
                    // (NaN: no telling).
                    let room = ((t - t_best).abs() - TIE_FRACTION).abs() - (uncertainty + u_best);
                    if room.is_nan() || room <= 0.0 {
                        doubtful = true;
                    }
                    if t < t_best - TIE_FRACTION {
                        true
                    } else if t <= t_best + TIE_FRACTION {
                        (limit, element) < (limit_best, element_best)
                    } else {
                        false
                    }
                }
            };
            if better {
                best = Some((t, uncertainty, limit, element));
            }
        },
    );
    best.map(|(_, _, limit, element)| (limit, element, doubtful))
}

/// The smallest injection (pu) at which some element of `subset` is predicted to cross its
/// threshold, by the straight line through two solved injections `a` and `b` (in increasing
/// order), over the elements of `watched`, or all. Infinite when nothing is heading for its
/// threshold.
pub(crate) fn predict_crossing_pu(
    thresholds: &Thresholds,
    subset: u8,
    base: &Snapshot,
    [(p_a, a), (p_b, b)]: [(f64, &Snapshot); 2],
    watched: Option<&Watched>,
) -> f64 {
    let dp = p_b - p_a;
    // Where the line through (p_a, q_a) and (p_b, q_b) reaches the threshold, for rising
    // quantities (a select, not a branch).
    let line = |[q_a, q_b]: [f64; 2], threshold: f64| {
        let rise = q_b - q_a;
        let f = (threshold - q_a) / rise;
        if rise > 0.0 {
            p_a + f * dp
        } else {
            f64::INFINITY
        }
    };
    earliest_crossing(thresholds, subset, base, [a, b], watched, line)
}

/// The elements a prediction looks at, when not all: node indices for the voltage criteria,
/// node indices whose feeding branch is looked at for the thermal one.
#[derive(Debug, Clone, Default)]
pub(crate) struct Watched {
    pub nodes: Vec<u32>,
    pub branches: Vec<u32>,
}

/// The smallest `crossing(quantities at each snapshot, threshold)` over the elements of
/// `subset` (those of `watched`, or all), each quantity in "upper" form (rising toward its
/// threshold).
fn earliest_crossing<const K: usize>(
    thresholds: &Thresholds,
    subset: u8,
    base: &Snapshot,
    at: [&Snapshot; K],
    watched: Option<&Watched>,
    crossing: impl Fn([f64; K], f64) -> f64,
) -> f64 {
    let n = at[0].v_pu.len();
    match watched {
        None => scan(thresholds, subset, base, at, 0..n, 1..n, crossing),
        Some(w) => {
            let nodes = w.nodes.iter().map(|&i| i as usize);
            let branches = w.branches.iter().map(|&i| i as usize);
            scan(thresholds, subset, base, at, nodes, branches, crossing)
        }
    }
}

/// [`earliest_crossing`] over the given voltage nodes and thermal branches.
fn scan<const K: usize>(
    thresholds: &Thresholds,
    subset: u8,
    base: &Snapshot,
    at: [&Snapshot; K],
    nodes: impl Iterator<Item = usize> + Clone,
    branches: impl Iterator<Item = usize>,
    crossing: impl Fn([f64; K], f64) -> f64,
) -> f64 {
    let pick = |best: f64, p: f64| if p < best { p } else { best };
    let n = at[0].v_pu.len();
    let v = at.map(|s| &s.v_pu[..n]);
    let mut best = f64::INFINITY;
    if subset & OVER != 0 {
        let ov = &thresholds.ov[..n];
        for i in nodes.clone() {
            best = pick(best, crossing(v.map(|v| v[i]), ov[i]));
        }
    }
    if subset & UNDER != 0 {
        let uv = &thresholds.uv[..n];
        for i in nodes.clone() {
            best = pick(best, crossing(v.map(|v| -v[i]), -uv[i]));
        }
    }
    if subset & THERMAL != 0 {
        let current = at.map(|s| &s.i_pu[..n]);
        let th = &thresholds.th[..n];
        for i in branches {
            best = pick(best, crossing(current.map(|c| c[i]), th[i]));
        }
    }
    if subset & CHANGE != 0 && thresholds.change_pu.is_finite() {
        let v0 = &base.v_pu[..n];
        for i in nodes {
            let change = v.map(|v| (v[i] - v0[i]).abs());
            best = pick(best, crossing(change, thresholds.change_pu));
        }
    }
    if subset & REVERSE != 0 && thresholds.head_p_min_pu > f64::NEG_INFINITY {
        best = pick(
            best,
            crossing(at.map(|s| -s.head_p_pu), -thresholds.head_p_min_pu),
        );
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;
    use headroom_model::Study;
    use headroom_synth::{SynthSettings, generate};
    use proptest::prelude::RngExt;
    use proptest::test_runner::{RngAlgorithm, TestRng};

    /// Moves every voltage and current of `at` to somewhere within its error bounds: to one of
    /// the bounds' corners (where a crossing fraction moves most) or inside them.
    fn somewhere_within_bounds(at: &Snapshot, rng: &mut TestRng) -> Snapshot {
        let mut moved = at.clone();
        let corners = rng.random_bool(0.5);
        let mut shift = |error: f64| {
            if corners {
                if rng.random_bool(0.5) { error } else { -error }
            } else {
                rng.random_range(-error..=error)
            }
        };
        for v in &mut moved.v_pu {
            *v += shift(at.error_v_pu);
        }
        for i in moved.i_pu.iter_mut().skip(1) {
            *i += shift(at.error_flow_pu);
        }
        moved
    }

    /// The pass and the failure of an answer are solved to within their error bounds, so the
    /// converged solutions may be anywhere within them. Unless `first_crossing` says its choice
    /// is in doubt, every such pair must give the same binding criterion and element: that is
    /// what lets two searches that start their solves differently name the same element. The
    /// cases put two to four overvoltage and thermal crossings at fractions equal to, or
    /// [`TIE_FRACTION`] above or below, the first one's, give or take a few of their
    /// uncertainties: inside a tie and on both sides of its edge.
    #[test]
    fn a_choice_not_in_doubt_holds_for_any_solutions_within_the_error_bounds() {
        let feeder = generate(&SynthSettings::new(80, 3))
            .to_feeder("ties")
            .unwrap();
        let prepared = crate::prepare::FeederStudy::prepare(&feeder, &Study::default());
        let case = &prepared.cases[0];
        let (thresholds, base): (_, &Snapshot) = (&case.thresholds, &case.snapshot);
        let n = base.v_pu.len();
        // What one resolution moves a voltage and a current by, pu (typical of a 1 kW step).
        let (span_v, span_i) = (1e-5, 1e-4);
        let mut rng = TestRng::deterministic_rng(RngAlgorithm::ChaCha);
        let (mut in_doubt, mut not_in_doubt) = (0, 0);
        for case_no in 0..3000 {
            let mut pass = base.clone();
            let mut fail = base.clone();
            // Each fraction is known to within `uncertainty`.
            let uncertainty = rng.random_range(2e-5..2e-4);
            for at in [&mut pass, &mut fail] {
                at.error_v_pu = uncertainty * span_v;
                at.error_flow_pu = uncertainty * span_i;
            }
            let first = rng.random_range(0.05..0.95);
            for crossing in 0..rng.random_range(2..=4) {
                let t = if crossing == 0 {
                    first
                } else {
                    let edge = TIE_FRACTION * f64::from(rng.random_range(-1..=1));
                    first + edge + uncertainty * rng.random_range(-4.0..4.0)
                };
                if rng.random_bool(0.5) {
                    let i = rng.random_range(0..n);
                    pass.v_pu[i] = thresholds.ov[i] - t * span_v;
                    fail.v_pu[i] = thresholds.ov[i] + (1.0 - t) * span_v;
                } else {
                    let i = rng.random_range(1..n);
                    pass.i_pu[i] = thresholds.th[i] - t * span_i;
                    fail.i_pu[i] = thresholds.th[i] + (1.0 - t) * span_i;
                }
            }
            let subset = OVER | THERMAL;
            let Some((limit, element, doubtful)) =
                first_crossing(thresholds, subset, base, &pass, &fail)
            else {
                panic!("case {case_no}: no crossing found");
            };
            if doubtful {
                in_doubt += 1;
                continue;
            }
            not_in_doubt += 1;
            for _ in 0..8 {
                let pass = somewhere_within_bounds(&pass, &mut rng);
                let fail = somewhere_within_bounds(&fail, &mut rng);
                let other = first_crossing(thresholds, subset, base, &pass, &fail)
                    .map(|(limit, element, _)| (limit, element));
                assert_eq!(
                    other,
                    Some((limit, element)),
                    "case {case_no}: {limit:?} at {element:?} was not in doubt"
                );
            }
        }
        // The cases reach both sides of the edge.
        assert!(
            in_doubt > 300 && not_in_doubt > 300,
            "{in_doubt} in doubt, {not_in_doubt} not"
        );
    }
}
