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

/// What one solved injection looks like to the criteria.
#[derive(Debug, Clone)]
pub(crate) struct Snapshot {
    /// Voltage magnitude per node, pu.
    pub v_pu: Vec<f64>,
    /// Feeding-branch current magnitude per node, pu (0 at the head).
    pub i_pu: Vec<f64>,
    /// Active power from the head into the feeder, pu.
    pub head_p_pu: f64,
}

impl Snapshot {
    pub fn capture(network: &Network, state: &FlowState) -> Snapshot {
        let n = state.n_nodes();
        let mut snapshot = Snapshot {
            v_pu: vec![0.0; n],
            i_pu: vec![0.0; n],
            head_p_pu: 0.0,
        };
        snapshot.refill(network, state);
        snapshot
    }

    pub fn refill(&mut self, network: &Network, state: &FlowState) {
        let n = state.n_nodes();
        let (v_re, v_im) = (state.v_re(), state.v_im());
        let (j_re, j_im) = (state.j_re(), state.j_im());
        for i in 0..n {
            // sqrt of the sum of squares: no overflow is possible at per-unit magnitudes, and it
            // is several times faster than hypot.
            self.v_pu[i] = (v_re[i] * v_re[i] + v_im[i] * v_im[i]).sqrt();
            self.i_pu[i] = (j_re[i] * j_re[i] + j_im[i] * j_im[i]).sqrt();
        }
        self.i_pu[0] = 0.0;
        self.head_p_pu = head_p_pu(network, state);
    }
}

/// Active power from the head node into its branches, pu.
pub(crate) fn head_p_pu(network: &Network, state: &FlowState) -> f64 {
    let (v0r, v0i) = (state.v_re()[0], state.v_im()[0]);
    let parents = network.parents();
    let (mut jr, mut ji) = (0.0, 0.0);
    for (i, &up) in parents.iter().enumerate().skip(1) {
        if up == 0 {
            jr += state.j_re()[i];
            ji += state.j_im()[i];
        }
    }
    v0r * jr + v0i * ji
}

/// Per-element thresholds of one scenario, in per unit, linear and squared.
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
    // Squared forms for the violation scan (no square roots in it).
    ov2: Vec<f64>,
    uv2: Vec<f64>,
    ch_hi2: Vec<f64>,
    ch_lo2: Vec<f64>,
    th2: Vec<f64>,
    /// 1 / (2·th), turning a squared-current distance into a current distance (0 at the head).
    inv_2th: Vec<f64>,
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
            ov2: Vec::with_capacity(n),
            uv2: Vec::with_capacity(n),
            ch_hi2: Vec::with_capacity(n),
            ch_lo2: Vec::with_capacity(n),
            th2: Vec::with_capacity(n),
            inv_2th: Vec::with_capacity(n),
        };
        let signed_square = |v: f64| if v > 0.0 { v * v } else { -1.0 };
        for i in 0..n {
            let v0 = base.v_pu[i];
            let ov = limits.v_max_pu.max(v0 + WORSE_EPS_PU);
            let uv = limits.v_min_pu.min(v0 - WORSE_EPS_PU);
            t.ov.push(ov);
            t.uv.push(uv);
            t.ov2.push(ov * ov);
            t.uv2.push(signed_square(uv));
            t.ch_hi2.push((v0 + change_pu).powi(2));
            t.ch_lo2.push(signed_square(v0 - change_pu));
            let th = if i == 0 {
                f64::INFINITY
            } else {
                let rating_pu = feeder.branches()[i - 1].rating_a / network.i_base_a();
                (rating_pu * limits.thermal_pct / 100.0).max(base.i_pu[i] + WORSE_EPS_PU)
            };
            t.th.push(th);
            t.th2.push(th * th);
            t.inv_2th.push(if th.is_finite() { 0.5 / th } else { 0.0 });
        }
        t
    }

    /// Replaces the thermal limit of the branch feeding node `i` by `limit_pu` (a what-if
    /// rating), kept above the base-case current `base_i_pu` as every thermal threshold is.
    pub(crate) fn set_thermal_limit_pu(&mut self, i: usize, limit_pu: f64, base_i_pu: f64) {
        debug_assert!(i > 0, "the head has no feeding branch");
        let th = limit_pu.max(base_i_pu + WORSE_EPS_PU);
        self.th[i] = th;
        self.th2[i] = th * th;
    }

    /// Which criteria (bits) the solved state violates, and the smallest distance of any
    /// quantity from its threshold (pu of voltage, current or power; approximate to first
    /// order, erring small). Convergence is judged by the caller.
    pub fn violated(&self, network: &Network, state: &FlowState) -> (u8, f64) {
        let n = state.n_nodes();
        let (v_re, v_im) = (&state.v_re()[..n], &state.v_im()[..n]);
        let (j_re, j_im) = (&state.j_re()[..n], &state.j_im()[..n]);
        let (ov2, uv2) = (&self.ov2[..n], &self.uv2[..n]);
        let (ch_hi2, ch_lo2, th2) = (&self.ch_hi2[..n], &self.ch_lo2[..n], &self.th2[..n]);
        let inv_2th = &self.inv_2th[..n];
        // Largest excess over each criterion's threshold (in squared form; > 0 is a violation)
        // and the smallest distance to any threshold. Plain comparisons rather than f64::max
        // and min keep the loop branch-free and vectorisable; a NaN candidate (0 · ∞ at the
        // head) is never taken.
        let (mut over, mut under, mut change, mut thermal) =
            (f64::MIN, f64::MIN, f64::MIN, f64::MIN);
        let mut v2_margin = f64::INFINITY;
        let mut i_margin = f64::INFINITY;
        for i in 0..n {
            let v2 = v_re[i] * v_re[i] + v_im[i] * v_im[i];
            let i2 = j_re[i] * j_re[i] + j_im[i] * j_im[i];
            let (a, b) = (v2 - ov2[i], uv2[i] - v2);
            let (c, d) = (v2 - ch_hi2[i], ch_lo2[i] - v2);
            let e = i2 - th2[i];
            over = if a > over { a } else { over };
            under = if b > under { b } else { under };
            let cd = if c > d { c } else { d };
            change = if cd > change { cd } else { change };
            thermal = if e > thermal { e } else { thermal };
            let (aa, ba, ca, da) = (a.abs(), b.abs(), c.abs(), d.abs());
            let ab = if aa < ba { aa } else { ba };
            let cd_abs = if ca < da { ca } else { da };
            let near = if ab < cd_abs { ab } else { cd_abs };
            v2_margin = if near < v2_margin { near } else { v2_margin };
            let ei = e.abs() * inv_2th[i];
            i_margin = if ei < i_margin { ei } else { i_margin };
        }
        let mut mask = (u8::from(over > 0.0) * OVER)
            | (u8::from(under > 0.0) * UNDER)
            | (u8::from(change > 0.0) * CHANGE)
            | (u8::from(thermal > 0.0) * THERMAL);
        // Voltage thresholds are below 1.5 pu: 2t < 3.
        let mut margin = (v2_margin / 3.0).min(i_margin);
        if self.head_p_min_pu > f64::NEG_INFINITY {
            let head_p = head_p_pu(network, state);
            if head_p < self.head_p_min_pu {
                mask |= REVERSE;
            }
            margin = margin.min((head_p - self.head_p_min_pu).abs());
        }
        (mask, margin)
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
        let n = at.v_pu.len();
        if subset & OVER != 0 {
            for i in 0..n {
                visit(Limit::Overvoltage, node(i), at.v_pu[i], self.ov[i]);
            }
        }
        if subset & UNDER != 0 {
            for i in 0..n {
                visit(Limit::Undervoltage, node(i), -at.v_pu[i], -self.uv[i]);
            }
        }
        if subset & THERMAL != 0 {
            for i in 1..n {
                visit(
                    Limit::Thermal,
                    Element::Branch(BranchIdx::new(i as u32 - 1)),
                    at.i_pu[i],
                    self.th[i],
                );
            }
        }
        if subset & CHANGE != 0 && self.change_pu.is_finite() {
            for i in 0..n {
                let change = (at.v_pu[i] - base.v_pu[i]).abs();
                visit(Limit::VoltageChange, node(i), change, self.change_pu);
            }
        }
        if subset & REVERSE != 0 && self.head_p_min_pu > f64::NEG_INFINITY {
            visit(
                Limit::ReverseFlow,
                Element::Head,
                -at.head_p_pu,
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
/// near-ties go to the order of [`Limit::ALL`], then to the lower element index.
pub(crate) fn first_crossing(
    thresholds: &Thresholds,
    subset: u8,
    base: &Snapshot,
    pass: &Snapshot,
    fail: &Snapshot,
) -> Option<(Limit, Element)> {
    let mut quantities_at_pass = Vec::new();
    thresholds.for_each_quantity(subset, base, pass, |_, _, q, _| quantities_at_pass.push(q));
    let mut best: Option<(f64, Limit, Element)> = None;
    let mut k = 0;
    thresholds.for_each_quantity(subset, base, fail, |limit, element, q_fail, threshold| {
        let q_pass = quantities_at_pass[k];
        k += 1;
        if q_fail <= threshold {
            return;
        }
        // Crossing fraction along pass → fail; a pair already beyond at `pass` crosses at 0.
        let t = if q_pass >= threshold || q_fail == q_pass {
            0.0
        } else {
            ((threshold - q_pass) / (q_fail - q_pass)).clamp(0.0, 1.0)
        };
        let better = match best {
            None => true,
            Some((t_best, limit_best, element_best)) => {
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
            best = Some((t, limit, element));
        }
    });
    best.map(|(_, limit, element)| (limit, element))
}

/// The smallest injection (pu) at which some element of `subset` is predicted to cross its
/// threshold, by a straight line through two solved injections `(p_a, a)` and `(p_b, b)`,
/// `p_a < p_b`. Infinite when nothing is heading for its threshold.
pub(crate) fn predict_crossing_pu(
    thresholds: &Thresholds,
    subset: u8,
    base: &Snapshot,
    (p_a, a): (f64, &Snapshot),
    (p_b, b): (f64, &Snapshot),
) -> f64 {
    let dp = p_b - p_a;
    // Fraction of the way from a to b (beyond b when > 1) at which the line through
    // (p_a, q_a) and (p_b, q_b) reaches the threshold, for rising quantities; written
    // branch-free so the loops vectorise.
    let fraction = |q_a: f64, q_b: f64, threshold: f64| {
        let rise = q_b - q_a;
        let f = (threshold - q_a) / rise;
        if rise > 0.0 { f } else { f64::INFINITY }
    };
    let pick = |best: f64, f: f64| if f < best { f } else { best };
    let n = a.v_pu.len();
    let (va, vb) = (&a.v_pu[..n], &b.v_pu[..n]);
    let mut best = f64::INFINITY;
    if subset & OVER != 0 {
        let ov = &thresholds.ov[..n];
        for i in 0..n {
            best = pick(best, fraction(va[i], vb[i], ov[i]));
        }
    }
    if subset & UNDER != 0 {
        let uv = &thresholds.uv[..n];
        for i in 0..n {
            best = pick(best, fraction(-va[i], -vb[i], -uv[i]));
        }
    }
    if subset & THERMAL != 0 {
        let (ia, ib, th) = (&a.i_pu[..n], &b.i_pu[..n], &thresholds.th[..n]);
        for i in 1..n {
            best = pick(best, fraction(ia[i], ib[i], th[i]));
        }
    }
    if subset & CHANGE != 0 && thresholds.change_pu.is_finite() {
        let v0 = &base.v_pu[..n];
        for i in 0..n {
            let (ca, cb) = ((va[i] - v0[i]).abs(), (vb[i] - v0[i]).abs());
            best = pick(best, fraction(ca, cb, thresholds.change_pu));
        }
    }
    if subset & REVERSE != 0 && thresholds.head_p_min_pu > f64::NEG_INFINITY {
        best = pick(
            best,
            fraction(-a.head_p_pu, -b.head_p_pu, -thresholds.head_p_min_pu),
        );
    }
    p_a + best * dp
}
