//! The capacity search at one node in one scenario: the stepped reference, the certified fast
//! search, the per-criterion capacities and the binding (criterion, element).

use std::cell::RefCell;
use std::collections::HashMap;
use std::sync::Arc;
use std::thread::LocalKey;

use headroom_flow::{FlowState, Injection, NotConvergedReason, Patience, SolveSettings, solve};
use headroom_model::BusIdx;

use crate::criteria::{
    ALL, CHANGE, Element, Limit, Margins, OVER, REVERSE, Snapshot, THERMAL, UNDER, Watched,
    first_crossing, predict_crossing_pu,
};
use crate::forecast::Forecast;
use crate::linear::{MAX_ERROR_SCALE, PathResponse};
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
    /// Whether the fast search came next to the nose of the P–V curve (voltage collapse) and
    /// left this answer to the stepped search (never for the stepped search itself).
    pub stepped_near_nose: bool,
}

/// What the fast search at one node leaves for the next node of the same feeder and scenario:
/// the error of the linear start at a solution it found. The first solve of a node's search
/// starts from the base case plus the linear response to the plant's current, whose error grows
/// as the square of that current; neighbouring nodes share most of their path to the head, so
/// the error one of them measured, scaled to the injection, takes most of that error off the
/// next one's start (see [`FeederStudy::node_capacity_after`]).
///
/// It only moves where solves start: every verdict is settled independently of the start, so
/// the answers are the same with or without it, and only the load-flow counts change.
#[derive(Debug, Default)]
pub struct NeighbourError {
    measured: Option<MeasuredError>,
}

/// The linear start's error at one solution of one node's search.
#[derive(Debug)]
struct MeasuredError {
    /// The scenario (index into the study's) and the plant's reactive power per unit of P.
    scenario: usize,
    q_per_p: f64,
    /// The injection solved, pu.
    p_pu: f64,
    /// The base case plus the error: the solution less the linear change from its current.
    offset: FlowState,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Outcome {
    /// Converged; the bits of the violated criteria.
    Converged(u8),
    /// The load flow did not converge: a failure under every criterion.
    Failed,
}

/// What a solve's result is for, which decides how tightly it is settled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Purpose {
    /// Only the verdict counts (the per-criterion searches, the stepped scan, the first solve
    /// of the search for all criteria).
    Verdict,
    /// The snapshot may also locate the binding element between a pass and a failure, so it is
    /// solved to the study's tolerance wherever a quantity is near its threshold: two searches
    /// reaching the same injection from different starts then find the same element.
    Crossing,
}

impl Outcome {
    fn passes(self, subset: u8) -> bool {
        matches!(self, Outcome::Converged(mask) if mask & subset == 0)
    }
}

/// Where the tight stage of [`Evaluator::settle`] starts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum TightFrom {
    /// From the base case's start, keeping the solution at hand should that solve fail.
    BaseKeepingThis,
    /// From the base case's start (the solve so far ran away).
    Base,
    /// From where the solve ran out of sweeps, and should it stop converging there, from the
    /// base case's start.
    HereThenBase,
    /// From the solution at hand (a slow solve), keeping it should the solve stop converging.
    Here,
}

/// Solves injections at one node. Solves start from the injections solved before, but each
/// verdict is settled at a tolerance that makes it independent of the start (see
/// [`Evaluator::settle`]), so the fast and the stepped search see the same verdicts.
struct Evaluator<'s, 'f> {
    study: &'s FeederStudy<'f>,
    case: &'s ScenarioCase,
    /// `case`'s index in the study's scenarios.
    scenario: usize,
    bus: BusIdx,
    q_per_p: f64,
    resolution_kw: f64,
    max_steps: u64,
    work: FlowState,
    /// The solutions of the last few converged injections, and their injections (pu; NaN for
    /// an empty slot); `newest` indexes the last one.
    solved: Vec<FlowState>,
    solved_p_pu: [f64; SOLVED_KEPT],
    newest: usize,
    /// The base case's linear response to the plant's current.
    response: PathResponse,
    /// The elements extrapolating predictions look at: the nodes of the plant's path, per
    /// node of it the off-path node nearest to each voltage limit, the branches of the path.
    watched: Watched,
    /// The linear start's error at the previous node's search, for this one's first start
    /// (the fast search only).
    neighbour: Option<MeasuredError>,
    /// The linear forecast over `watched`, built by the first fast search.
    forecast: Option<Forecast>,
    /// What the criteria saw in the last solve.
    seen: Snapshot,
    outcomes: HashMap<u64, Outcome>,
    /// Every injection the fast searches solved (in resolutions), with its outcome and what
    /// the criteria saw: each later per-criterion search starts from the tightest bracket
    /// they give it.
    visited: Vec<(u64, Outcome, Option<Arc<Snapshot>>)>,
    /// The injection at the nose of the node's two-bus model, kW ([`two_bus_nose_p`]).
    nose_kw: f64,
    load_flows: u32,
    sweep_iterations: u32,
}

thread_local! {
    /// Solution buffers of finished node answers, reused by the next ones on the same thread
    /// instead of being allocated and filled again.
    static SPARE_STATES: RefCell<Vec<FlowState>> = const { RefCell::new(Vec::new()) };
    /// Snapshot buffers of finished node answers, reused likewise.
    static SPARE_SNAPSHOTS: RefCell<Vec<Snapshot>> = const { RefCell::new(Vec::new()) };
}

/// Spare solution buffers kept per thread.
const SPARE_STATES_KEPT: usize = SOLVED_KEPT + 1;

/// Spare snapshot buffers kept per thread: about as many as one node answer solves.
const SPARE_SNAPSHOTS_KEPT: usize = 16;

/// A spare buffer of `pool` that `fits` (one that does not is dropped).
fn take_spare<T: 'static>(
    pool: &'static LocalKey<RefCell<Vec<T>>>,
    fits: impl Fn(&T) -> bool,
) -> Option<T> {
    pool.with_borrow_mut(|spare| {
        spare.retain(&fits);
        spare.pop()
    })
}

/// Keeps the `buffers` that `fit` as spares of `pool`, up to `kept` of them.
fn keep_spares<T: 'static>(
    pool: &'static LocalKey<RefCell<Vec<T>>>,
    buffers: impl IntoIterator<Item = T>,
    kept: usize,
    fits: impl Fn(&T) -> bool,
) {
    pool.with_borrow_mut(|spare| {
        for buffer in buffers {
            if spare.len() < kept && fits(&buffer) {
                spare.push(buffer);
            }
        }
    });
}

/// A state buffer for `network`, reused when one of its size is spare. Its contents are
/// whatever the last user left: a warm start overwrites every voltage and a solve every
/// current.
fn spare_state(network: &headroom_flow::Network) -> FlowState {
    let n = network.n_nodes();
    take_spare(&SPARE_STATES, |state| state.n_nodes() == n)
        .unwrap_or_else(|| FlowState::flat(network))
}

/// A snapshot buffer the size of `like`, reused when one is spare; its contents are whatever
/// the last user left (a judge overwrites all of them) or `like`'s.
fn spare_snapshot(like: &Snapshot) -> Snapshot {
    let n = like.v_pu.len();
    take_spare(&SPARE_SNAPSHOTS, |snapshot| snapshot.v_pu.len() == n)
        .unwrap_or_else(|| like.clone())
}

impl Drop for Evaluator<'_, '_> {
    fn drop(&mut self) {
        let n = self.work.n_nodes();
        let mut states = std::mem::take(&mut self.solved);
        states.push(std::mem::replace(&mut self.work, FlowState::empty()));
        keep_spares(&SPARE_STATES, states, SPARE_STATES_KEPT, |state| {
            state.n_nodes() == n
        });
        let snapshots = std::mem::take(&mut self.visited)
            .into_iter()
            .filter_map(|(_, _, snapshot)| Arc::try_unwrap(snapshot?).ok());
        let seen = std::mem::take(&mut self.seen);
        keep_spares(
            &SPARE_SNAPSHOTS,
            std::iter::once(seen).chain(snapshots),
            SPARE_SNAPSHOTS_KEPT,
            |snapshot| snapshot.v_pu.len() == n,
        );
    }
}

impl<'s, 'f> Evaluator<'s, 'f> {
    fn new(study: &'s FeederStudy<'f>, s: usize, bus: BusIdx) -> Evaluator<'s, 'f> {
        let case = &study.cases[s];
        let search = &study.study.search;
        let mut path: Vec<u32> = study
            .feeder
            .path_to_head(bus)
            .map(|node| node.index() as u32)
            .collect();
        path.reverse();
        // Per node m of the plant's path, the nodes whose path to the head leaves the plant's
        // at m (m's subtree less its path child's, two index ranges) and among them the node
        // with the least headroom to each voltage limit: the plant moves every node hanging
        // from one point alike (to first order), so only these can be the first to cross.
        let end = |node: u32| study.feeder.subtree_end(BusIdx::new(node)).index();
        let mut watched = Watched::default();
        for (at, &m) in path.iter().enumerate().rev() {
            let ranges = match path.get(at + 1) {
                Some(&child) => [(m as usize + 1, child as usize), (end(child), end(m))],
                None => [(m as usize + 1, end(m)), (0, 0)],
            };
            watched.nodes.push(m);
            for table in [&case.least_ov_headroom, &case.least_uv_headroom] {
                let mut nearest = m;
                for (start, stop) in ranges {
                    if let Some(node) = table.least(start, stop)
                        && table.key(node) < table.key(nearest)
                    {
                        nearest = node;
                    }
                }
                if nearest != m && watched.nodes.last() != Some(&nearest) {
                    watched.nodes.push(nearest);
                }
            }
            if m != 0 {
                watched.branches.push(m);
            }
        }
        Evaluator {
            study,
            case,
            scenario: s,
            bus,
            q_per_p: study.study.generation.q_per_p(),
            resolution_kw: search.resolution_kw,
            // The largest multiple of the resolution at most max_kw (guarding against
            // 20000 / 0.1 landing a hair below an integer).
            max_steps: (search.max_kw / search.resolution_kw + 1e-9).floor() as u64,
            work: spare_state(&study.network),
            solved: Vec::with_capacity(SOLVED_KEPT),
            solved_p_pu: [f64::NAN; SOLVED_KEPT],
            newest: 0,
            response: case.linear.path_response(path),
            neighbour: None,
            forecast: None,
            watched,
            seen: spare_snapshot(&case.snapshot),
            outcomes: HashMap::new(),
            visited: Vec::new(),
            nose_kw: 1000.0
                * two_bus_nose_p(
                    case.snapshot.v_pu[bus.index()],
                    study.path_r_pu[bus.index()],
                    study.path_x_pu[bus.index()],
                    study.study.generation.q_per_p(),
                ),
            load_flows: 0,
            sweep_iterations: 0,
        }
    }

    fn kw(&self, steps: u64) -> f64 {
        steps as f64 * self.resolution_kw
    }

    /// Whether a fast search's answer reaches next to the nose of the P–V curve: no solution
    /// one resolution above it, or that injection (`max_kw` for an answer at `max_kw`) at least
    /// [`NOSE_FRACTION`] of the way to the nose of the node's two-bus model. The fast search
    /// certifies a pass at the answer and a failure above it, and takes every injection below
    /// the answer to pass as well; that holds while each quantity moves one way as the
    /// injection grows, which stops near the nose, where the voltage rise peaks and turns back
    /// (a node can be over its limit for a stretch of injections and under it again above).
    /// There the stepped search, which tries every step, decides.
    fn near_nose(&self, answer: &FastAnswer) -> bool {
        let reached_kw = match &answer.hi {
            Some((_, None)) => return true,
            Some((h, Some(_))) => self.kw(*h),
            None => self.kw(self.max_steps),
        };
        reached_kw >= NOSE_FRACTION * self.nose_kw
    }

    /// Solves the injection of `p_kw`; a converged solution is kept as the last one.
    fn solve_at(&mut self, p_kw: f64, purpose: Purpose) -> Outcome {
        let p_pu = self.study.network.kw_to_pu(p_kw);
        self.warm_start(p_pu);
        // A start extrapolated from other injections can be poor enough to send the sweep
        // astray: no solution is declared before a solve from the base case's start fails
        // too (see `settle`).
        let outcome = self.settle(p_pu, purpose);
        self.load_flows += 1;
        if let Outcome::Converged(_) = outcome {
            let slot = if self.solved.len() < SOLVED_KEPT {
                self.solved.push(spare_state(&self.study.network));
                self.solved.len() - 1
            } else {
                (self.newest + 1) % SOLVED_KEPT
            };
            std::mem::swap(&mut self.work, &mut self.solved[slot]);
            self.solved_p_pu[slot] = p_pu;
            self.newest = slot;
        }
        self.outcomes.insert(p_kw.to_bits(), outcome);
        outcome
    }

    /// Solves the injection of `p_pu` from the start in `self.work` until its verdict (and, for
    /// [`Purpose::Crossing`], its snapshot) is settled.
    fn settle(&mut self, p_pu: f64, purpose: Purpose) -> Outcome {
        let (study, case) = (self.study, self.case);
        let network = &study.network;
        let injection = [Injection {
            bus: self.bus,
            p_pu,
            q_pu: p_pu * self.q_per_p,
        }];
        let settings = &study.solve_settings;
        let demand = &case.demand;
        let thresholds = &case.thresholds;
        // Solve loosely first: when every quantity is farther from its threshold than the error
        // left after the last sweep can be ([`error_bounds`]), the verdict is already the
        // converged one. Otherwise go on to the study's tolerance, and within a hair of a
        // threshold to a tighter one still, so that verdicts do not depend on where the solve
        // started. The snapshot of a crossing also waits until every quantity is a stage's
        // margin from its threshold.
        let s_plant_pu = p_pu.hypot(p_pu * self.q_per_p);
        let flow_per_voltage = 1.0 + case.demand_mva_pu + s_plant_pu;
        let contraction =
            case.sweep_contraction + s_plant_pu * study.path_z_abs_pu[self.bus.index()];
        let head_v_pu = network.head_v_pu();
        let bounds = |margins: Margins| {
            error_bounds(
                contraction,
                margins.lowest_v_pu,
                flow_per_voltage * head_v_pu,
            )
        };
        // A verdict is the converged solution's once every quantity is farther from its
        // threshold than the error bounds allow; a crossing's snapshot also waits for the
        // stage's margin.
        let settled = |margins: Margins, mismatch_pu: f64, stage_margin_pu: f64| {
            let (per_voltage, per_flow) = bounds(margins);
            margins.voltage_pu > per_voltage * mismatch_pu
                && margins.flow_pu > per_flow * mismatch_pu
                && (purpose == Purpose::Verdict || margins.least_pu() > stage_margin_pu)
        };
        // (tolerance, margin that settles a crossing there); `None`: the aimed stage below.
        let stages = [
            Some((LOOSE_TOL_PU.max(settings.tol_pu), SETTLED_MARGIN_PU)),
            None,
            Some((settings.tol_pu, crate::criteria::NEAR_PU)),
            Some((TIGHT_TOL_PU.min(settings.tol_pu), 0.0)),
        ];
        let tight = stages.len() - 1;
        let mut outcome = Outcome::Failed;
        // The last sweep's largest change and the margins of the solution reached so far
        // (`None`: not judged yet).
        let mut reached: Option<(f64, Option<Margins>)> = None;
        // How the tight stage starts, when a slow or failed solve sends it there early.
        let mut tight_from = TightFrom::BaseKeepingThis;
        let mut stage = 0;
        while stage < stages.len() {
            let this = stage;
            stage += 1;
            let (tol_pu, settled_margin_pu) = match (stages[this], reached) {
                (Some(fixed), _) => fixed,
                // A verdict alone, not settled at the loose tolerance: solve on just until its
                // margins are twice what the error bounds ask of the last change, when that
                // stops short of the study's tolerance.
                (None, Some((mismatch_pu, Some(margins)))) if purpose == Purpose::Verdict => {
                    let (per_voltage, per_flow) = bounds(margins);
                    let aim_pu =
                        0.5 * (margins.voltage_pu / per_voltage).min(margins.flow_pu / per_flow);
                    if !(aim_pu > settings.tol_pu && aim_pu < mismatch_pu) {
                        continue;
                    }
                    (aim_pu, SETTLED_MARGIN_PU)
                }
                (None, _) => continue,
            };
            let stage_settings = SolveSettings {
                tol_pu,
                max_iterations: settings.max_iterations,
            };
            if this == tight {
                // Within a hair of a threshold, the last bits of a solution depend on where
                // it started, and so may the verdict: the tight stage solves again from the
                // start of the base case, which depends on the injection alone, so that every
                // search reaches the same numbers (keeping the solution it has, should that
                // solve stall on rounding). A slow solve, next to the nose of the P–V curve,
                // goes on from where it is instead (the base case's start can be too far from
                // a large injection's solution for the sweep to find it), and so does one that
                // ran out of sweeps, before it tries the base case's start; one that ran away
                // starts again from the base case's start. Each goes on past the sweep cap
                // while the sweep still converges, so a solution is not declared missing for
                // want of sweeps.
                let kept = match tight_from {
                    TightFrom::BaseKeepingThis => {
                        let kept = self.work.clone();
                        self.start_from_base(p_pu);
                        Some(kept)
                    }
                    TightFrom::Base => {
                        self.start_from_base(p_pu);
                        None
                    }
                    TightFrom::HereThenBase => None,
                    TightFrom::Here => Some(self.work.clone()),
                };
                let mut result = self.solve_patiently(&injection, &stage_settings);
                if result.is_err() && tight_from == TightFrom::HereThenBase {
                    self.start_from_base(p_pu);
                    result = self.solve_patiently(&injection, &stage_settings);
                }
                match result {
                    Ok(converged) => {
                        let (mask, margins) = thresholds.judge(&self.work, &mut self.seen);
                        outcome = Outcome::Converged(mask);
                        self.seen
                            .set_error_bounds(bounds(margins), converged.mismatch_pu);
                    }
                    // The solution at hand and its verdict stand (a slow solve that stops
                    // converging keeps what it reached); a failed solve stays failed.
                    Err(_) => {
                        if let Some(kept) = kept {
                            self.work = kept;
                        }
                    }
                }
                break;
            }
            if let Some((mismatch_pu, margins)) = reached
                && mismatch_pu <= tol_pu
            {
                // A solution whose last sweep already moved less than this stage's tolerance
                // is where a solve to that tolerance would have stopped: judge it as it is.
                let margins = margins.unwrap_or_else(|| {
                    let (mask, margins) = thresholds.judge(&self.work, &mut self.seen);
                    outcome = Outcome::Converged(mask);
                    self.seen.set_error_bounds(bounds(margins), mismatch_pu);
                    margins
                });
                reached = Some((mismatch_pu, Some(margins)));
                if settled(margins, mismatch_pu, settled_margin_pu) {
                    break;
                }
                continue;
            }
            match solve(network, demand, &injection, &mut self.work, &stage_settings) {
                Ok(converged) => {
                    self.sweep_iterations += converged.iterations;
                    // The solve for a crossing goes on to the study's tolerance unless every
                    // quantity is far from its threshold at the loose one: the plant's own
                    // voltage, where a voltage limit mostly binds, can tell that it is not,
                    // and the judge waits for the solution the next stage settles on.
                    if this == 0
                        && purpose == Purpose::Crossing
                        && converged.iterations <= SLOW_SWEEPS
                        && thresholds.node_voltage_margin_pu(&self.work, self.bus.index())
                            <= settled_margin_pu
                    {
                        reached = Some((converged.mismatch_pu, None));
                        continue;
                    }
                    let (mask, margins) = thresholds.judge(&self.work, &mut self.seen);
                    outcome = Outcome::Converged(mask);
                    self.seen
                        .set_error_bounds(bounds(margins), converged.mismatch_pu);
                    // A slow sweep means the injection is next to the nose of the P–V curve,
                    // where the sweep shrinks its error by a factor ρ close to 1 and the
                    // margins above, which assume ρ < 0.99, cannot be trusted: the tight
                    // stage decides.
                    if converged.iterations > SLOW_SWEEPS {
                        tight_from = TightFrom::Here;
                        stage = tight;
                        continue;
                    }
                    if settled(margins, converged.mismatch_pu, settled_margin_pu) {
                        break;
                    }
                    reached = Some((converged.mismatch_pu, Some(margins)));
                }
                // No solution from this start: the tight stage decides, going on from here
                // while the sweep still converges, else from the base case's start.
                Err(failed) => {
                    self.sweep_iterations += failed.iterations;
                    outcome = Outcome::Failed;
                    tight_from = match failed.reason {
                        NotConvergedReason::IterationLimit => TightFrom::HereThenBase,
                        NotConvergedReason::Diverged => TightFrom::Base,
                    };
                    stage = tight;
                }
            }
        }
        outcome
    }

    /// Solves from the state in `self.work`, past the sweep cap while the sweep still
    /// converges ([`headroom_flow::solve_patiently`]), up to [`PATIENT_SWEEPS`]; a sweep that
    /// stalls on rounding within the study's tolerance counts as converged there.
    fn solve_patiently(
        &mut self,
        injection: &[Injection],
        stage: &SolveSettings,
    ) -> Result<headroom_flow::Converged, headroom_flow::NotConverged> {
        let patience = Patience {
            max_sweeps: PATIENT_SWEEPS,
            accept_pu: self.study.solve_settings.tol_pu,
        };
        let result = headroom_flow::solve_patiently(
            &self.study.network,
            &self.case.demand,
            injection,
            &mut self.work,
            stage,
            &patience,
        );
        self.sweep_iterations += match &result {
            Ok(converged) => converged.iterations,
            Err(failed) => failed.iterations,
        };
        result
    }

    /// Starts from the two solved injections nearest to `p_pu` (the base case counts as solved
    /// at 0), by the secant through them in the plant's current ([`start_from_secant`]). With
    /// only the base case solved, see [`Evaluator::start_from_base`].
    fn warm_start(&mut self, p_pu: f64) {
        let mut nearest: [Option<(f64, &FlowState)>; 2] = [None, None];
        let candidates = std::iter::once((0.0, &self.case.base)).chain(
            self.solved
                .iter()
                .enumerate()
                .map(|(slot, state)| (self.solved_p_pu[slot], state)),
        );
        for (q, state) in candidates {
            // An injection solved twice counts once.
            if q.is_nan() || nearest.iter().flatten().any(|(o, _)| *o == q) {
                continue;
            }
            let d = (q - p_pu).abs();
            match nearest {
                [None, _] => nearest[0] = Some((q, state)),
                [Some((a, _)), _] if d < (a - p_pu).abs() => {
                    nearest = [Some((q, state)), nearest[0]];
                }
                [_, None] => nearest[1] = Some((q, state)),
                [_, Some((b, _))] if d < (b - p_pu).abs() => nearest[1] = Some((q, state)),
                _ => {}
            }
        }
        // Far beyond the two nearest (several times farther than they are apart), the secant's
        // bend is off, and so it is next to the only injection solved at this node, where the
        // secant to the base case takes the mean slope over the whole way from 0 for the slope
        // there: the linear response corrected at the nearest solved injection does better.
        if let [Some((a, _)), other] = nearest
            && a > 0.0
            && other.is_none_or(|(b, _)| b == 0.0 || (p_pu - a).abs() > FAR_BEYOND * (a - b).abs())
            && let Some(slot) = (0..self.solved.len()).find(|&slot| self.solved_p_pu[slot] == a)
        {
            self.start_linear(p_pu, Anchor::Solved { p_pu: a, slot });
            return;
        }
        let [Some(near), Some(other)] = nearest else {
            // Nothing solved at this node yet (one solved injection goes to the corrected
            // start above): the previous node's error corrects the start, when there is one.
            let anchor = if self.neighbour.is_some() {
                Anchor::Neighbour
            } else {
                Anchor::Base
            };
            self.start_linear(p_pu, anchor);
            return;
        };
        let plant = Plant {
            k: self.bus.index(),
            p_pu,
            q_per_p: self.q_per_p,
        };
        if !start_from_secant(&mut self.work, &plant, near, other) {
            self.start_from_base(p_pu);
        }
    }

    /// Starts from the base case plus its linear response to the plant's current, the loads'
    /// response included ([`LinearResponse`]). The current is taken at the plant's own voltage
    /// on its Thévenin equivalent ([`settle_current`], from the base voltage).
    fn start_from_base(&mut self, p_pu: f64) {
        self.start_linear(p_pu, Anchor::Base);
    }

    /// Like [`Evaluator::start_from_base`], corrected by the linear response's error at an
    /// `anchor`'s injection P_a: the response is the load flow's derivative at P = 0, so its
    /// error grows as P², and the anchor's, scaled by (P / P_a)², is added.
    fn start_linear(&mut self, p_pu: f64, anchor: Anchor) {
        let plant = Plant {
            k: self.bus.index(),
            p_pu,
            q_per_p: self.q_per_p,
        };
        let base = &self.case.base;
        let (br, bi) = (base.v_re(), base.v_im());
        let k = plant.k;
        // The plant's current where the node's voltage is base + response + `extra`, from a
        // first guess.
        let fixed_point = |plant: &Plant, extra: (f64, f64), current: (f64, f64)| {
            let (vr, vi) = (br[k] + extra.0, bi[k] + extra.1);
            settle_current(current, |current| {
                let (dr, di) = self.response.at_node(current);
                plant.current(vr + dr, vi + di)
            })
        };
        let linear = &self.case.linear;
        // The state the error is taken from, its injection and the plant current whose linear
        // change it still holds (`None` for a neighbour's, which has it taken out).
        let (anchor, p_a, i_a) = match anchor {
            Anchor::Base => {
                let current = fixed_point(&plant, (0.0, 0.0), plant.current(br[k], bi[k]));
                self.response
                    .set_changed(linear, base, None, current, &mut self.work);
                return;
            }
            Anchor::Solved { p_pu: p_a, slot } => {
                // The anchor's error is taken at its own plant current, so that the start at
                // P_a is the anchor's solution itself.
                let solved = &self.solved[slot];
                let i_a = current_of(p_a, plant.q_per_p, solved.v_re()[k], solved.v_im()[k]);
                (solved, p_a, Some(i_a))
            }
            Anchor::Neighbour => {
                let measured = self.neighbour.as_ref().expect("checked by the caller");
                (&measured.offset, measured.p_pu, None)
            }
        };
        let (dr, di) = i_a.map_or((0.0, 0.0), |i_a| self.response.at_node(i_a));
        let s = ((p_pu / p_a) * (p_pu / p_a)).min(MAX_ERROR_SCALE);
        let (er, ei) = (
            s * (anchor.v_re()[k] - br[k] - dr),
            s * (anchor.v_im()[k] - bi[k] - di),
        );
        let first_guess = match i_a {
            Some((ar, ai)) => (ar * p_pu / p_a, ai * p_pu / p_a),
            None => plant.current(br[k] + er, bi[k] + ei),
        };
        let i_p = fixed_point(&plant, (er, ei), first_guess);
        let (ar, ai) = i_a.unwrap_or((0.0, 0.0));
        let current = (i_p.0 - s * ar, i_p.1 - s * ai);
        self.response
            .set_changed(linear, base, Some((anchor, s)), current, &mut self.work);
    }

    /// Measures the linear start's error at this node's newest solution into `into`, for the
    /// next node's first start.
    fn measure_error(&self, into: &mut NeighbourError) {
        if self.solved.is_empty() {
            return;
        }
        let (solved, p_pu) = (&self.solved[self.newest], self.solved_p_pu[self.newest]);
        let k = self.bus.index();
        let i_a = current_of(p_pu, self.q_per_p, solved.v_re()[k], solved.v_im()[k]);
        let mut offset = match into.measured.take() {
            Some(old) if old.offset.n_nodes() == solved.n_nodes() => old.offset,
            _ => FlowState::flat(&self.study.network),
        };
        self.response
            .set_less_change(&self.case.linear, solved, i_a, &mut offset);
        into.measured = Some(MeasuredError {
            scenario: self.scenario,
            q_per_p: self.q_per_p,
            p_pu,
            offset,
        });
    }

    /// What the criteria see at `p_kw` solved from the base case's start (which depends on the
    /// injection alone) to the study's tolerance: the same numbers, to the last bit, in every
    /// search. `None` when that solve finds no solution.
    fn canonical_point(&mut self, p_kw: f64) -> Option<Snapshot> {
        let p_pu = self.study.network.kw_to_pu(p_kw);
        let injection = [Injection {
            bus: self.bus,
            p_pu,
            q_pu: p_pu * self.q_per_p,
        }];
        let settings = self.study.solve_settings;
        self.start_from_base(p_pu);
        self.load_flows += 1;
        self.solve_patiently(&injection, &settings).ok()?;
        let mut snapshot = spare_snapshot(&self.case.snapshot);
        self.case.thresholds.judge(&self.work, &mut snapshot);
        Some(snapshot)
    }

    /// The outcome at `p_kw`, solved once.
    fn outcome(&mut self, p_kw: f64) -> Outcome {
        match self.outcomes.get(&p_kw.to_bits()) {
            Some(&outcome) => outcome,
            None => self.solve_at(p_kw, Purpose::Verdict),
        }
    }

    /// Solves at `p_kw` and captures what the criteria see (`None`: no solution).
    fn point(&mut self, p_kw: f64, purpose: Purpose) -> (Outcome, Option<Arc<Snapshot>>) {
        let outcome = self.solve_at(p_kw, purpose);
        let snapshot = match outcome {
            // The judge overwrites the whole snapshot: a spare buffer takes its place.
            Outcome::Converged(_) => {
                let fresh = spare_snapshot(&self.case.snapshot);
                Some(Arc::new(std::mem::replace(&mut self.seen, fresh)))
            }
            Outcome::Failed => None,
        };
        (outcome, snapshot)
    }

    /// A first guess of where `subset` binds, pu, from the node's two-bus model: its base voltage
    /// behind the path impedance, solved exactly, for the voltage criteria of the node's subtree;
    /// the plant's current added to every branch current on the path to the head; the head power
    /// for reverse flow. It leaves the loads' response out; [`Forecast`] starts from it.
    fn two_bus_estimate_pu(&self, subset: u8) -> f64 {
        let k = self.bus.index();
        let case = self.case;
        let base = &case.snapshot;
        let thresholds = &case.thresholds;
        let (r, x) = (self.study.path_r_pu[k], self.study.path_x_pu[k]);
        let qpp = self.q_per_p;
        let v0 = base.v_pu[k];
        let rise_per_pu = (r + x * qpp) / v0;
        let mut best = f64::INFINITY;
        let mut to_voltage = |target: f64| {
            let p = two_bus_p_for_voltage(v0, target, r, x, qpp);
            if p >= 0.0 {
                best = best.min(p);
            }
        };
        if subset & OVER != 0 && rise_per_pu > 0.0 {
            to_voltage(v0 + case.subtree_ov_headroom[k]);
        }
        if subset & UNDER != 0 && rise_per_pu < 0.0 {
            to_voltage(v0 - case.subtree_uv_headroom[k]);
        }
        if subset & CHANGE != 0 && thresholds.change_pu.is_finite() && rise_per_pu != 0.0 {
            to_voltage(v0 + thresholds.change_pu.copysign(rise_per_pu));
        }
        let state = &case.base;
        if subset & THERMAL != 0 {
            // Current injected per pu of P at the base voltage: conj(S / V), S = 1 + j·qpp.
            let (vr, vi) = (state.v_re()[k], state.v_im()[k]);
            let inv = 1.0 / (vr * vr + vi * vi);
            let (ur, ui) = ((vr + qpp * vi) * inv, (vi - qpp * vr) * inv);
            let u2 = ur * ur + ui * ui;
            let mut at = k;
            while at != 0 {
                // |J − s·u| = limit: s²|u|² − 2s·Re(J·conj u) + |J|² − limit² = 0, one root
                // above 0 while the branch is within its limit.
                let (jr, ji) = (state.j_re()[at], state.j_im()[at]);
                let a = jr * ur + ji * ui;
                let c = jr * jr + ji * ji - thresholds.th[at] * thresholds.th[at];
                let s = (a + (a * a - u2 * c).max(0.0).sqrt()) / u2;
                best = best.min(s);
                at = self.study.network.parents()[at] as usize;
            }
        }
        if subset & REVERSE != 0 && thresholds.head_p_min_pu > f64::NEG_INFINITY {
            let head_p = crate::criteria::head_p_pu(state);
            best = best.min((head_p - thresholds.head_p_min_pu).max(0.0));
        }
        best
    }

    /// The linear forecast's crossing of `subset`, pu: see [`Forecast::crossing_pu`].
    fn forecast_pu(&self, subset: u8, anchor: Option<(f64, &Snapshot)>, guess_pu: f64) -> f64 {
        let forecast = self.forecast.as_ref().expect("built by the fast search");
        forecast.crossing_pu(
            &self.case.thresholds,
            subset,
            &self.case.snapshot,
            anchor,
            self.q_per_p,
            guess_pu,
        )
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
        // The search for every criterion together ends on the pass and failure that locate the
        // binding element; the per-criterion searches need verdicts only. Its first evaluation,
        // at the linear forecast, is usually one of those two.
        let purpose = if subset == ALL {
            Purpose::Crossing
        } else {
            Purpose::Verdict
        };
        // Evaluations made while the answer was bracketed; past a few, predictions are not
        // closing in (a kink in the criteria, or no solution above) and bisection takes over.
        let mut bracketed_evaluations = 0;
        if self.forecast.is_none() {
            self.forecast = Some(Forecast::new(
                &self.case.linear,
                &self.response,
                self.study.network.parents(),
                &self.case.base,
                &self.watched,
            ));
        }
        loop {
            let upper = hi.as_ref().map_or(self.max_steps + 1, |(h, _)| *h);
            if lo >= self.max_steps || upper == lo + 1 {
                return FastAnswer { lo, lo_snap, hi };
            }
            let lo_pu = self.kw(lo) / 1000.0;
            let predicted_pu = match (&hi, &below) {
                // Interpolate between the pass and a solved failure.
                (Some((h, Some(h_snap))), _) => {
                    self.predict(subset, [(lo, &lo_snap), (*h, h_snap)], false)
                }
                // Beyond the last pass: the linear forecast anchored there, its secant rounds
                // started from the line through the last two passes.
                (_, Some((b, b_snap))) => {
                    let guess = self.predict(subset, [(*b, b_snap), (lo, &lo_snap)], true);
                    self.forecast_pu(subset, Some((lo_pu, &lo_snap)), guess)
                }
                // From the base case: the forecast alone, its rounds started from the node's
                // two-bus model.
                (_, None) => {
                    let guess = self.two_bus_estimate_pu(subset);
                    self.forecast_pu(subset, None, guess)
                }
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
            let (outcome, snapshot) = self.point(self.kw(steps), purpose);
            self.visited.push((steps, outcome, snapshot.clone()));
            if outcome.passes(subset) {
                let snap = snapshot.expect("a passing injection has converged");
                below = Some((lo, std::mem::replace(&mut lo_snap, snap)));
                lo = steps;
            } else {
                hi = Some((steps, snapshot));
            }
        }
    }

    /// Where the fast search for `subset` alone starts, from every injection the fast searches
    /// solved (and the base case, a pass at 0): the highest pass below the lowest failure of
    /// `subset`, that failure when there is one, and the pass below it and the base case to
    /// extrapolate from (the limit sought may lie well beyond the passes).
    fn detail_start(&self, subset: u8, base: &Arc<Snapshot>) -> FastStart {
        let failure = self
            .visited
            .iter()
            .filter(|(_, outcome, _)| !outcome.passes(subset))
            .min_by_key(|(steps, ..)| *steps);
        let upper = failure.map_or(u64::MAX, |(steps, ..)| *steps);
        let mut passes: Vec<(u64, &Arc<Snapshot>)> = self
            .visited
            .iter()
            .filter(|(steps, outcome, _)| outcome.passes(subset) && *steps < upper)
            .map(|(steps, _, snapshot)| {
                let snapshot = snapshot
                    .as_ref()
                    .expect("a passing injection has converged");
                (*steps, snapshot)
            })
            .collect();
        passes.push((0, base));
        passes.sort_by_key(|(steps, _)| std::cmp::Reverse(*steps));
        passes.dedup_by_key(|(steps, _)| *steps);
        let (lo, lo_snap) = passes[0];
        let below = passes
            .get(1)
            .map(|(steps, snapshot)| (*steps, Arc::clone(snapshot)));
        FastStart {
            lo,
            lo_snap: Arc::clone(lo_snap),
            below,
            hi: failure.map(|(steps, _, snapshot)| (*steps, snapshot.clone())),
        }
    }

    /// The predicted crossing of `subset` (pu) on the line through two solved injections, in
    /// increasing order (in resolutions): see [`predict_crossing_pu`]. Beyond the last solved
    /// injection only the watched elements are looked at; between a pass and a failure every
    /// element is, so that whatever failed is seen.
    fn predict(&self, subset: u8, [a, b]: [(u64, &Snapshot); 2], beyond: bool) -> f64 {
        let pu_per_step = self.resolution_kw / 1000.0;
        predict_crossing_pu(
            &self.case.thresholds,
            subset,
            &self.case.snapshot,
            [
                (a.0 as f64 * pu_per_step, a.1),
                (b.0 as f64 * pu_per_step, b.1),
            ],
            beyond.then_some(&self.watched),
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

/// First-stage tolerance of an injection's solve, pu.
const LOOSE_TOL_PU: f64 = 1e-6;

/// A crossing's snapshot reached at [`LOOSE_TOL_PU`] stands when every quantity is at least this
/// far from its threshold (pu), and farther than its error bounds: a hundred times that
/// tolerance, see [`SETTLED_MARGIN_PER_CHANGE`].
const SETTLED_MARGIN_PU: f64 = 1e-4;

/// A verdict stands at any stage when every quantity is at least this many times the last
/// sweep's largest voltage change from its threshold, where [`error_bounds`] has no bound to
/// give. The sweep shrinks its error by a factor ρ < 1 per sweep, so a solution whose last
/// sweep moved it by δ is within about δ·ρ/(1 − ρ) of the converged one: under a hundredth of
/// the margin while ρ < 0.99, the assumption [`SETTLED_MARGIN_PU`] makes of every solve at the
/// loose tolerance. A solve slow enough for ρ to come near 1 takes more than [`SLOW_SWEEPS`]
/// and is settled by the tight stage instead.
const SETTLED_MARGIN_PER_CHANGE: f64 = 100.0;

/// The error bounds of [`error_bounds`] are doubled (rounding, and room to spare).
const ERROR_BOUND_SAFETY: f64 = 2.0;

/// [`error_bounds`] holds for node voltages at least this much below the lowest one solved
/// (pu), and so for a last sweep's change up to it.
const VOLTAGE_ROOM_PU: f64 = 0.01;

/// How far the quantities of a solved state can be from the converged solution's, per unit of
/// the last sweep's largest voltage change δ: (node voltages, branch currents and head power).
///
/// One sweep computes every load's current I_j = conj(S_j / V_j) from the voltages V it starts
/// from, sums them up the feeder, and sets V_i = V_head − Σ Z_b·J_b over the branches b on node
/// i's path. Against the solution V*, |I_j(V) − I_j(V*)| = |S_j|·|V_j − V*_j| / (|V_j|·|V*_j|),
/// so the error e = V − V* shrinks per sweep by at least the factor
/// ρ = max over i of Σ_{b on i's path} |Z_b| · Σ_{j fed by b} |S_j| / v_lo²,
/// v_lo a lower bound of every |V_j| and |V*_j|: `contraction` is that sum (the plant's own |S|
/// over its whole path included) and v_lo is the lowest solved voltage less
/// [`VOLTAGE_ROOM_PU`]. With the last sweep's change δ, the error after it is at most
/// ρ·δ / (1 − ρ); the branch currents come from the voltages before that sweep, whose error is
/// at most δ / (1 − ρ), times the |S| they feed over v_lo², and the head power's is that times
/// the head voltage (`flow_per_voltage`: |S| of everything, plant included, times the head
/// voltage). Without a bound (ρ ≥ 1/2, or voltages too low), the fixed factor
/// [`SETTLED_MARGIN_PER_CHANGE`] stands in.
fn error_bounds(contraction: f64, lowest_v_pu: f64, flow_per_voltage: f64) -> (f64, f64) {
    let v_lo = lowest_v_pu - VOLTAGE_ROOM_PU;
    let rho = contraction / (v_lo * v_lo);
    if v_lo > 0.5 && rho < 0.5 {
        let per_error = ERROR_BOUND_SAFETY / (1.0 - rho);
        (
            per_error * rho,
            per_error * flow_per_voltage / (v_lo * v_lo),
        )
    } else {
        (
            SETTLED_MARGIN_PER_CHANGE,
            SETTLED_MARGIN_PER_CHANGE * flow_per_voltage,
        )
    }
}

/// Tolerance of the last stage, for verdicts within [`crate::criteria::NEAR_PU`] of a
/// threshold, pu. Solutions reached from different starting points agree far closer than that
/// margin, so verdicts do not depend on the search path.
const TIGHT_TOL_PU: f64 = 1e-12;

/// A stage of a solve that takes more sweeps than this is next to the nose of the P–V curve:
/// the sweep shrinks its error by a factor close to 1 there, and the solve goes on from where
/// it is to the tight stage's tolerance before its verdict is taken. Ordinary solves take 1 to
/// 6 sweeps.
const SLOW_SWEEPS: u32 = 30;

/// Most sweeps of a solve that goes on past the cap because it still converges.
const PATIENT_SWEEPS: u32 = 10_000;

/// The fast search's answers are left to the stepped search once the injection above them
/// reaches this share of the way to the nose of the node's two-bus model. On the weak 3.3 kV
/// feeders of the tests the voltage rise peaked at 0.9 to 1.0 of that model's nose, and the
/// network's own nose lay within 15 % of it; ordinary limits bind far below (1.10 pu at 0.15).
const NOSE_FRACTION: f64 = 0.5;

/// A solve starts from the linear response corrected at the nearest solved injection, not the
/// secant through the two nearest, when it is more than this many times farther from the
/// nearest than they are apart.
const FAR_BEYOND: f64 = 4.0;

/// Converged injections kept for warm starts.
const SOLVED_KEPT: usize = 4;

/// The order of the per-criterion searches (indexes into the voltage, thermal, change and
/// reverse-flow capacities): each starts from the injections the ones before solved.
const DETAIL_ORDER: [usize; 4] = [1, 2, 0, 3];

/// Predicted evaluations allowed once the answer is bracketed, before bisecting.
const MAX_PREDICTED_IN_BRACKET: u32 = 4;

#[cfg(test)]
/// The receiving-end voltage of the same two-bus system at injection `p` (pu): the larger root
/// of the quartic; NaN past the nose of the curve.
fn two_bus_voltage(vs: f64, p: f64, r: f64, x: f64, q_per_p: f64) -> f64 {
    let q = p * q_per_p;
    let b = vs * vs + 2.0 * (r * p + x * q);
    let c = (p * p + q * q) * (r * r + x * x);
    let disc = b * b / 4.0 - c;
    if disc < 0.0 {
        return f64::NAN;
    }
    (b / 2.0 + disc.sqrt()).sqrt()
}

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

/// The largest injection P (pu, with Q = P·`q_per_p`) a line r + jx from a stiff source at
/// `vs` can take at all: the nose of its P–V curve, where the two-bus quartic's discriminant
/// (V_s²/2 + P(r + xq))² − P²(1 + q²)(r² + x²) = V_s⁴/4 + V_s²·P·r' − P²·x'² vanishes, with
/// r' = r + xq and x' = x − rq. Infinite when x' = 0 (the discriminant never falls to 0).
fn two_bus_nose_p(vs: f64, r: f64, x: f64, q_per_p: f64) -> f64 {
    let r_eff = r + x * q_per_p;
    let x_eff = x - r * q_per_p;
    if x_eff == 0.0 {
        return f64::INFINITY;
    }
    vs * vs * (r_eff + r_eff.hypot(x_eff)) / (2.0 * x_eff * x_eff)
}

/// The plant being solved: its node, its injection (pu) and its reactive power per unit of P.
struct Plant {
    k: usize,
    p_pu: f64,
    q_per_p: f64,
}

impl Plant {
    /// The current it injects at node voltage `vr + j·vi`: conj(S / V), S = P + jQ (pu).
    fn current(&self, vr: f64, vi: f64) -> (f64, f64) {
        current_of(self.p_pu, self.q_per_p, vr, vi)
    }
}

/// The plant's current at a fixed point of `step` (the current at the node voltage a start
/// gives for a current), from `current`: until a step moves it by at most
/// [`CURRENT_SETTLED`] of its size, at most [`CURRENT_STEPS`] steps, keeping the last finite
/// one. Each step shrinks the error by about the plant's share of its node's voltage (its rise
/// over the voltage, a few per cent), so a handful of steps settle it; a start whose current
/// is left unsettled is off by as much at the plant's node, where it sends the first solve of a
/// node's search a sweep further.
fn settle_current(mut current: (f64, f64), step: impl Fn((f64, f64)) -> (f64, f64)) -> (f64, f64) {
    for _ in 0..CURRENT_STEPS {
        let next = step(current);
        if !(next.0.is_finite() && next.1.is_finite()) {
            break;
        }
        let moved = (next.0 - current.0).hypot(next.1 - current.1);
        current = next;
        if moved <= CURRENT_SETTLED * current.0.hypot(current.1) {
            break;
        }
    }
    current
}

/// [`settle_current`] stops once a step moves the current by at most this share of it.
const CURRENT_SETTLED: f64 = 1e-13;

/// Most steps of [`settle_current`] (near the nose of the P–V curve a step shrinks the error
/// little).
const CURRENT_STEPS: usize = 20;

/// conj(S / V) for S = p·(1 + j·`q_per_p`) at voltage `vr + j·vi` (pu).
pub(crate) fn current_of(p: f64, q_per_p: f64, vr: f64, vi: f64) -> (f64, f64) {
    let q = p * q_per_p;
    let inv = 1.0 / (vr * vr + vi * vi);
    ((p * vr + q * vi) * inv, (p * vi - q * vr) * inv)
}

/// Sets `work` to the secant through two solved injections `near` and `other` (pu, solution)
/// taken in the plant's current rather than its power: each node moves from `near` by the
/// change between the two solutions times the ratio of the plant's current changes (complex).
/// The network answers the plant's current almost linearly (loads included), so this keeps the
/// loads' response the two solutions show, and the bend of the plant's own current P/V that a
/// line in P misses. The current at `plant.p_pu` is taken at the voltage this start gives its
/// node ([`settle_current`]).
fn start_from_secant(
    work: &mut FlowState,
    plant: &Plant,
    (near_p_pu, near): (f64, &FlowState),
    (other_p_pu, other): (f64, &FlowState),
) -> bool {
    let k = plant.k;
    let (nr, ni) = (near.v_re(), near.v_im());
    let (or, oi) = (other.v_re(), other.v_im());
    let (i0r, i0i) = current_of(near_p_pu, plant.q_per_p, nr[k], ni[k]);
    let (i1r, i1i) = current_of(other_p_pu, plant.q_per_p, or[k], oi[k]);
    let (sr, si) = (i0r - i1r, i0i - i1i);
    let s2 = sr * sr + si * si;
    if !(s2 > 0.0 && s2.is_finite()) {
        return false;
    }
    // r = (I − I0) / (I0 − I1).
    let ratio = |ir: f64, ii: f64| {
        let (dr, di) = (ir - i0r, ii - i0i);
        ((dr * sr + di * si) / s2, (di * sr - dr * si) / s2)
    };
    let (dkr, dki) = (nr[k] - or[k], ni[k] - oi[k]);
    let (ir, ii) = settle_current(plant.current(nr[k], ni[k]), |(ir, ii)| {
        let (rr, ri) = ratio(ir, ii);
        plant.current(nr[k] + dkr * rr - dki * ri, ni[k] + dkr * ri + dki * rr)
    });
    let (rr, ri) = ratio(ir, ii);
    if !(rr.is_finite() && ri.is_finite()) {
        return false;
    }
    work.set_voltages(|i| {
        let (dr, di) = (nr[i] - or[i], ni[i] - oi[i]);
        (nr[i] + dr * rr - di * ri, ni[i] + dr * ri + di * rr)
    });
    true
}

/// What a linear start is corrected by ([`Evaluator::start_linear`]).
#[derive(Debug, Clone, Copy)]
enum Anchor {
    /// Nothing: the base case plus the linear response, which depends on the injection alone.
    Base,
    /// The error at a solved injection of this node (pu; its slot in `solved`).
    Solved { p_pu: f64, slot: usize },
    /// The error the previous node's search measured (`Evaluator::neighbour`).
    Neighbour,
}

struct FastStart {
    lo: u64,
    lo_snap: Arc<Snapshot>,
    below: Option<(u64, Arc<Snapshot>)>,
    hi: Option<(u64, Option<Arc<Snapshot>>)>,
}

struct FastAnswer {
    lo: u64,
    lo_snap: Arc<Snapshot>,
    hi: Option<(u64, Option<Arc<Snapshot>>)>,
}

impl FeederStudy<'_> {
    /// Solves one injection of `p_kw` at `bus` in scenario `s` with reactive power
    /// `p_kw · q_per_p`, as the searches do: the violated criteria (bits; 0 when the load flow
    /// has no solution), what the criteria see (`None` then), and the load flows used.
    pub(crate) fn solve_injection(
        &self,
        s: usize,
        bus: BusIdx,
        p_kw: f64,
        q_per_p: f64,
    ) -> (u8, Option<Snapshot>, u32) {
        let mut eval = Evaluator::new(self, s, bus);
        eval.q_per_p = q_per_p;
        let (outcome, snapshot) = eval.point(p_kw, Purpose::Crossing);
        let mask = match outcome {
            Outcome::Converged(mask) => mask,
            Outcome::Failed => 0,
        };
        (mask, snapshot.map(Arc::unwrap_or_clone), eval.load_flows)
    }

    /// The hosting capacity of `bus` in scenario `s` (an index into the study's scenarios).
    ///
    /// # Panics
    /// When `s` or `bus` is out of range.
    pub fn node_capacity(&self, s: usize, bus: BusIdx, options: &CapacityOptions) -> NodeCapacity {
        self.node_capacity_after(s, bus, options, &mut NeighbourError::default())
    }

    /// [`FeederStudy::node_capacity`] for the next of a run of nodes answered in turn: the fast
    /// search starts from the error `neighbour` holds, when it was measured in scenario `s` of
    /// this feeder, and leaves there its own for the next node. Neighbouring nodes in the
    /// feeder's order share most of their path, which makes the error a close one. The answer
    /// is the same as `node_capacity`'s; only its load-flow and sweep counts differ.
    ///
    /// # Panics
    /// When `s` or `bus` is out of range.
    pub fn node_capacity_after(
        &self,
        s: usize,
        bus: BusIdx,
        options: &CapacityOptions,
        neighbour: &mut NeighbourError,
    ) -> NodeCapacity {
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
                stepped_near_nose: false,
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

        // The fast search, unless an answer of it reaches next to the nose of the P–V curve
        // (see `Evaluator::near_nose`): then the stepped search decides the node's answers, from
        // a fresh start, so that they are the stepped search's own.
        let fast = match options.method {
            SearchMethod::Fast => 'fast: {
                let n = self.network.n_nodes();
                eval.neighbour = neighbour.measured.take().filter(|measured| {
                    measured.scenario == s
                        && measured.q_per_p == eval.q_per_p
                        && measured.offset.n_nodes() == n
                });
                let base_snap = Arc::clone(&case.snapshot);
                let answer = eval.fast(
                    ALL,
                    FastStart {
                        lo: 0,
                        lo_snap: base_snap.clone(),
                        below: None,
                        hi: None,
                    },
                );
                neighbour.measured = eval.neighbour.take();
                eval.measure_error(neighbour);
                if eval.near_nose(&answer) {
                    break 'fast None;
                }
                if options.criteria_detail {
                    for k in DETAIL_ORDER {
                        let (subset, on) = detail_subsets[k];
                        if !on {
                            continue;
                        }
                        // A capacity at max_kw is the same under every criterion alone (no
                        // solution a resolution above the answer is near the nose).
                        let steps = if answer.hi.is_none() {
                            answer.lo
                        } else {
                            let start = eval.detail_start(subset, &base_snap);
                            let alone = eval.fast(subset, start);
                            if eval.near_nose(&alone) {
                                break 'fast None;
                            }
                            alone.lo
                        };
                        detail[k] = Some(eval.kw(steps));
                    }
                }
                Some((
                    answer.lo,
                    Some(answer.lo_snap),
                    answer.hi.map(|(h, snap)| (eval.kw(h), snap)),
                ))
            }
            SearchMethod::Stepped => None,
        };
        let stepped_near_nose = fast.is_none() && options.method == SearchMethod::Fast;
        if stepped_near_nose {
            let mut fresh = Evaluator::new(self, s, bus);
            fresh.load_flows = eval.load_flows;
            fresh.sweep_iterations = eval.sweep_iterations;
            eval = fresh;
            detail = [None; 4];
        }
        let (steps, pass_snap, fail) = match fast {
            Some(found) => found,
            None => {
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
                        Arc::clone(&case.snapshot)
                    } else {
                        eval.point(eval.kw(steps), Purpose::Crossing)
                            .1
                            .expect("a passing injection has converged")
                    };
                    // The first failing injection above the answer: one resolution up, or the
                    // failing step itself when steps are not multiples of the resolution.
                    let fail_kw = eval.kw(steps + 1).min(eval.first_failing_kw(steps));
                    (
                        steps,
                        Some(pass_snap),
                        Some((fail_kw, eval.point(fail_kw, Purpose::Crossing).1)),
                    )
                }
            }
        };

        let (limit, element) = match (fail, pass_snap) {
            (None, _) | (_, None) => (Limit::SearchMax, Element::None),
            (Some((_, None)), _) => (Limit::NotConverged, Element::None),
            (Some((fail_kw, Some(fail_snap))), Some(pass_snap)) => {
                let crossing = |pass: &Snapshot, fail: &Snapshot| {
                    first_crossing(&case.thresholds, ALL, &case.snapshot, pass, fail)
                };
                match crossing(&pass_snap, &fail_snap) {
                    // Next to the edge of a tie, the last bits of the two solutions decide, and
                    // they depend on where each solve started: both are solved again from the
                    // start that depends on the injection alone, so that every search decides
                    // on the same numbers.
                    Some((_, _, true)) => {
                        let pass_kw = eval.kw(steps);
                        match (eval.canonical_point(pass_kw), eval.canonical_point(fail_kw)) {
                            (Some(pass), Some(fail)) => crossing(&pass, &fail),
                            _ => crossing(&pass_snap, &fail_snap),
                        }
                    }
                    decided => decided,
                }
                .map_or(
                    (Limit::NotConverged, Element::None),
                    |(limit, element, _)| (limit, element),
                )
            }
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
            stepped_near_nose,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use headroom_model::{Feeder, Study};
    use headroom_synth::{SynthSettings, generate};

    /// A seeded synthetic feeder of `n_nodes` nodes.
    fn synthetic(n_nodes: usize, seed: u64, name: &str) -> Feeder {
        generate(&SynthSettings::new(n_nodes, seed))
            .to_feeder(name)
            .unwrap()
    }

    /// The nodes the start tests look at: a quarter and half way down the numbering, and the
    /// last.
    fn probed_nodes(n: usize) -> [usize; 3] {
        [n / 4, n / 2, n - 1]
    }

    /// Largest distance between the node voltages of two states, pu.
    fn farthest(a: &FlowState, b: &FlowState) -> f64 {
        (0..a.n_nodes())
            .map(|i| (a.v_re()[i] - b.v_re()[i]).hypot(a.v_im()[i] - b.v_im()[i]))
            .fold(0.0, f64::max)
    }

    /// The solution of scenario `s` with `p_pu` injected at `bus` (unity power factor), solved
    /// from the base case to 1e-13 pu.
    fn solved_at(prepared: &FeederStudy, s: usize, bus: BusIdx, p_pu: f64) -> FlowState {
        let case = &prepared.cases[s];
        let mut exact = case.base.clone();
        let injection = [Injection {
            bus,
            p_pu,
            q_pu: 0.0,
        }];
        let tight = SolveSettings {
            tol_pu: 1e-13,
            max_iterations: 500,
        };
        solve(
            &prepared.network,
            &case.demand,
            &injection,
            &mut exact,
            &tight,
        )
        .unwrap();
        exact
    }

    /// An evaluator at `bus` in scenario 0 with one injection solved, `p_pu`, and its solution.
    fn with_one_solved<'s, 'f>(
        prepared: &'s FeederStudy<'f>,
        bus: BusIdx,
        p_pu: f64,
    ) -> (Evaluator<'s, 'f>, FlowState) {
        let mut eval = Evaluator::new(prepared, 0, bus);
        let solution = solved_at(prepared, 0, bus, p_pu);
        eval.solved.push(solution.clone());
        eval.solved_p_pu[0] = p_pu;
        (eval, solution)
    }

    /// How far from `exact` the secant through a solved injection and the base case puts the
    /// start at `p_pu` (plant at node `k`, unity power factor), pu.
    fn secant_to_base_off(
        work: &mut FlowState,
        k: usize,
        p_pu: f64,
        solved: (f64, &FlowState),
        case: &ScenarioCase,
        exact: &FlowState,
    ) -> f64 {
        let plant = Plant {
            k,
            p_pu,
            q_per_p: 0.0,
        };
        assert!(start_from_secant(work, &plant, solved, (0.0, &case.base)));
        farthest(work, exact)
    }

    /// The start from the base case moves every node by the base case's linear response to the
    /// plant's current, the loads' response included. What it leaves out is of second order in
    /// the rise (1.4e-2 to 2.2e-2 pu here, 1,500 kW): under a thousandth of the rise (measured
    /// 4e-6 to 7e-5 of it). Leaving the loads' response out, as a superposition through the path
    /// impedances would, is off by more (6e-3 of the rise at the first node).
    #[test]
    fn the_start_from_the_base_case_is_close_to_the_solution_at_every_node() {
        let feeder = synthetic(400, 3, "start");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let case = &prepared.cases[0];
        let n = feeder.n_nodes();
        for k in probed_nodes(n) {
            let bus = BusIdx::new(k as u32);
            let mut eval = Evaluator::new(&prepared, 0, bus);
            let p_pu = prepared.network.kw_to_pu(1500.0);
            eval.start_from_base(p_pu);
            let exact = solved_at(&prepared, 0, bus, p_pu);
            let rise = farthest(&exact, &case.base);
            let off = farthest(&eval.work, &exact);
            assert!(
                off < 1e-3 * rise,
                "node {k}: the start is {off:.2e} pu from the solution, the rise {rise:.2e} pu"
            );
        }
    }

    /// Corrected by its error at a solved injection, the linear start is that solution there,
    /// and far beyond it (twice the injection) much closer to the solution than the base
    /// case's linear start or the secant through the solved injection and the base case.
    #[test]
    fn the_start_corrected_at_a_solved_injection_stays_close_far_beyond_it() {
        let feeder = synthetic(1000, 1, "anchored");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let case = &prepared.cases[0];
        let n = feeder.n_nodes();
        for k in probed_nodes(n) {
            let bus = BusIdx::new(k as u32);
            let p_a = prepared.network.kw_to_pu(1500.0);
            let (mut eval, anchor) = with_one_solved(&prepared, bus, p_a);
            eval.start_linear(p_a, Anchor::Solved { p_pu: p_a, slot: 0 });
            assert!(
                farthest(&eval.work, &anchor) < 1e-12,
                "node {k}: not the anchor"
            );
            let p = 2.0 * p_a;
            let exact = solved_at(&prepared, 0, bus, p);
            let rise = farthest(&exact, &case.base);
            eval.start_linear(p, Anchor::Solved { p_pu: p_a, slot: 0 });
            let corrected = farthest(&eval.work, &exact);
            eval.start_from_base(p);
            let from_base = farthest(&eval.work, &exact);
            let secant = secant_to_base_off(&mut eval.work, k, p, (p_a, &anchor), case, &exact);
            assert!(
                corrected < 1e-5 * rise && corrected < 0.2 * from_base.min(secant),
                "node {k}: corrected start {corrected:.2e} pu off, base's {from_base:.2e}, \
                 secant {secant:.2e}, rise {rise:.2e}"
            );
        }
    }

    /// The start from the base case puts the plant's current where its own node's voltage
    /// says: the current is settled to a fixed point of the node's linear response, so the
    /// start's voltage there is the base voltage plus that response to the plant's current at
    /// that very voltage (to rounding). Three fixed-point steps, as before, left it up to
    /// 3.8e-10 pu off at 1,500 kW and 1.2e-6 pu at 8,000 kW, and a node's first solve a sweep
    /// longer.
    #[test]
    fn the_start_puts_the_plants_current_at_its_own_voltage() {
        let feeder = synthetic(1000, 1, "fixed-point");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let case = &prepared.cases[0];
        for k in probed_nodes(feeder.n_nodes()) {
            let bus = BusIdx::new(k as u32);
            let mut eval = Evaluator::new(&prepared, 0, bus);
            for p_kw in [1500.0, 8000.0] {
                let p = prepared.network.kw_to_pu(p_kw);
                eval.start_from_base(p);
                let (vr, vi) = (eval.work.v_re()[k], eval.work.v_im()[k]);
                let current = current_of(p, 0.0, vr, vi);
                let (dr, di) = eval.response.at_node(current);
                let off = (case.base.v_re()[k] + dr - vr).hypot(case.base.v_im()[k] + di - vi);
                assert!(off < 1e-12, "node {k} at {p_kw} kW: {off:.2e} pu off");
            }
        }
    }

    /// One resolution from the only injection solved at a node, the linear start corrected
    /// there is much closer to the solution than the secant through it and the base case,
    /// whose slope is the mean one from 0 (40 to 570 times closer here, 1 kW either side of
    /// 1,500 kW).
    #[test]
    fn next_to_the_only_solved_injection_the_corrected_start_beats_the_secant_to_the_base() {
        let feeder = synthetic(1000, 1, "next-to");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let case = &prepared.cases[0];
        for k in probed_nodes(feeder.n_nodes()) {
            let bus = BusIdx::new(k as u32);
            let p_a = prepared.network.kw_to_pu(1500.0);
            let (mut eval, anchor) = with_one_solved(&prepared, bus, p_a);
            for p_kw in [1499.0, 1501.0] {
                let p = prepared.network.kw_to_pu(p_kw);
                let exact = solved_at(&prepared, 0, bus, p);
                eval.warm_start(p);
                let chosen = farthest(&eval.work, &exact);
                let secant = secant_to_base_off(&mut eval.work, k, p, (p_a, &anchor), case, &exact);
                assert!(
                    chosen < 0.05 * secant,
                    "node {k} at {p_kw} kW: start {chosen:.2e} pu off, secant {secant:.2e}"
                );
            }
        }
    }

    /// The linear start's error measured at the previous node's solution, scaled to the
    /// injection, takes most of the error off the next node's start: the two share most of
    /// their path, so the loads' and the plant's second-order response look alike (here 50 to
    /// 500 times closer, measured 1,500 kW at the one and 1,700 kW at the other).
    #[test]
    fn the_start_corrected_by_the_previous_nodes_error_is_closer_than_the_base_cases() {
        let feeder = synthetic(1000, 1, "neighbours");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let n = feeder.n_nodes();
        for k in probed_nodes(n) {
            let (previous, bus) = (BusIdx::new(k as u32 - 1), BusIdx::new(k as u32));
            let p_a = prepared.network.kw_to_pu(1500.0);
            let mut measured = NeighbourError::default();
            with_one_solved(&prepared, previous, p_a)
                .0
                .measure_error(&mut measured);
            let mut eval = Evaluator::new(&prepared, 0, bus);
            eval.neighbour = measured.measured.take();
            let p = prepared.network.kw_to_pu(1700.0);
            let exact = solved_at(&prepared, 0, bus, p);
            eval.start_from_base(p);
            let from_base = farthest(&eval.work, &exact);
            eval.start_linear(p, Anchor::Neighbour);
            let corrected = farthest(&eval.work, &exact);
            assert!(
                corrected < 0.05 * from_base,
                "node {k}: corrected start {corrected:.2e} pu off, base's {from_base:.2e}"
            );
        }
    }

    /// The error bounds hold sweep by sweep on real solves: stopped after any sweep, the
    /// voltages are within half of `error_bounds`' first factor (the safety factor left out)
    /// times that sweep's change of the converged solution, and the branch currents within half
    /// of the second.
    #[test]
    fn a_sweep_leaves_no_more_error_than_the_bounds_allow() {
        let feeder = synthetic(600, 2, "bounds");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let n = feeder.n_nodes();
        let one_sweep = SolveSettings {
            tol_pu: 0.0,
            max_iterations: 1,
        };
        let mut checked = 0;
        for (s, case) in prepared.cases.iter().enumerate() {
            for k in [n / 3, 2 * n / 3, n - 1] {
                let bus = BusIdx::new(k as u32);
                let p_pu = prepared.network.kw_to_pu(2000.0);
                let injection = [Injection {
                    bus,
                    p_pu,
                    q_pu: 0.0,
                }];
                let exact = solved_at(&prepared, s, bus, p_pu);
                let contraction = case.sweep_contraction + p_pu * prepared.path_z_abs_pu[k];
                let flow_per_voltage =
                    (1.0 + case.demand_mva_pu + p_pu) * prepared.network.head_v_pu();
                let mut eval = Evaluator::new(&prepared, s, bus);
                eval.start_from_base(p_pu);
                let mut state = eval.work.clone();
                for _ in 0..6 {
                    let Err(stopped) = solve(
                        &prepared.network,
                        &case.demand,
                        &injection,
                        &mut state,
                        &one_sweep,
                    ) else {
                        break;
                    };
                    let delta = stopped.mismatch_pu;
                    if delta < 1e-12 {
                        break;
                    }
                    let lowest = (0..n)
                        .map(|i| state.v_mag_pu(i))
                        .fold(f64::INFINITY, f64::min);
                    let (per_voltage, per_flow) =
                        error_bounds(contraction, lowest, flow_per_voltage);
                    assert!(per_voltage < 1.0, "no bound: {per_voltage}");
                    let v_error = farthest(&state, &exact);
                    let i_error = (1..n)
                        .map(|i| {
                            (state.j_re()[i] - exact.j_re()[i])
                                .hypot(state.j_im()[i] - exact.j_im()[i])
                        })
                        .fold(0.0, f64::max);
                    assert!(
                        v_error <= 0.5 * per_voltage * delta,
                        "node {k}: voltage error {v_error:.2e} pu after a change of {delta:.2e}"
                    );
                    assert!(
                        i_error <= 0.5 * per_flow * delta,
                        "node {k}: current error {i_error:.2e} pu after a change of {delta:.2e}"
                    );
                    checked += 1;
                }
            }
        }
        assert!(checked >= 12, "only {checked} sweeps checked");
    }

    /// Next to the nose of the P–V curve the sweep shrinks its error slowly (by about 0.92 per
    /// sweep at 8,366 kW on this node, where the nose of the network is near 8,455 kW): from
    /// the base case's start it needs about 200 sweeps, twice the cap, while a start one
    /// kilowatt away converges within it. Both starts must reach the same verdict, and beyond
    /// the nose neither finds a solution.
    #[test]
    fn a_slow_solve_reaches_the_same_verdict_from_any_start() {
        let mut settings = SynthSettings::new(200, 5);
        settings.nominal_kv = 3.3;
        let region = headroom_synth::generate_region_with(1, &settings);
        let feeder = region[0].1.to_feeder(&region[0].0).unwrap();
        let mut study = Study::default();
        study.limits.v_max_pu = 1.10;
        study.limits.v_min_pu = 0.90;
        study.limits.thermal_pct = 400.0;
        study.limits.voltage_change_pct = 0.0;
        let prepared = FeederStudy::prepare(&feeder, &study);
        let bus = feeder.node_by_id("n115").unwrap();
        for (p_kw, solution) in [(8366.0, true), (8420.0, true), (8600.0, false)] {
            let mut cold = Evaluator::new(&prepared, 0, bus);
            let from_base = cold.solve_at(p_kw, Purpose::Verdict);
            let mut warm = Evaluator::new(&prepared, 0, bus);
            warm.solve_at(p_kw - 100.0, Purpose::Verdict);
            warm.solve_at(p_kw - 1.0, Purpose::Verdict);
            let from_near = warm.solve_at(p_kw, Purpose::Verdict);
            assert_eq!(from_base, from_near, "{p_kw} kW");
            assert_eq!(
                matches!(from_base, Outcome::Converged(_)),
                solution,
                "{p_kw} kW: {from_base:?}"
            );
        }
    }

    /// A crossing's solve skips the judge at the loose tolerance when the plant's own voltage
    /// is within the settling margin of a threshold: that is sound only if the judge's voltage
    /// margin is never above a node's own, so the least node margin must be the judge's
    /// margin, to the bit, in solved states near and far from the limits.
    #[test]
    fn the_judges_voltage_margin_is_the_least_of_the_nodes_own() {
        let feeder = synthetic(300, 5, "margins");
        let prepared = FeederStudy::prepare(&feeder, &Study::default());
        let n = prepared.network.n_nodes();
        for s in 0..prepared.cases.len() {
            let thresholds = &prepared.cases[s].thresholds;
            for (bus, p_kw) in [(n - 1, 0.0), (n - 1, 2500.0), (n / 2, 4000.0), (7, 6000.0)] {
                let p_pu = prepared.network.kw_to_pu(p_kw);
                let state = solved_at(&prepared, s, BusIdx::new(bus as u32), p_pu);
                let mut seen = spare_snapshot(&prepared.cases[s].snapshot);
                let (_, margins) = thresholds.judge(&state, &mut seen);
                let least = (0..n)
                    .map(|i| thresholds.node_voltage_margin_pu(&state, i))
                    .fold(f64::INFINITY, f64::min);
                assert_eq!(
                    least.to_bits(),
                    margins.voltage_pu.to_bits(),
                    "scenario {s}, {p_kw} kW at node {bus}"
                );
            }
        }
    }

    /// The nose of the two-bus model. Lossless line at unity power factor: the largest power
    /// is V²/(2X) (the textbook maximum power transfer at tan φ = 0, e.g. Van Cutsem and
    /// Vournas, "Voltage Stability of Electric Power Systems", 1998, ch. 2; quoted from
    /// memory). Lossy lines with reactive power: the receiving-end voltage exists just below
    /// the nose and not just above it.
    #[test]
    fn the_two_bus_nose_is_the_largest_injection_with_a_solution() {
        let nose = two_bus_nose_p(1.0, 0.0, 0.25, 0.0);
        assert!((nose - 1.0 / (2.0 * 0.25)).abs() < 1e-12, "{nose}");
        for (vs, r, x, q_per_p) in [
            (1.0, 0.2, 0.1, 0.0),
            (0.98, 0.1, 0.3, -0.48),
            (1.03, 0.3, 0.2, 0.33),
        ] {
            let nose = two_bus_nose_p(vs, r, x, q_per_p);
            assert!(nose.is_finite() && nose > 0.0);
            assert!(two_bus_voltage(vs, nose * 0.999, r, x, q_per_p).is_finite());
            assert!(two_bus_voltage(vs, nose * 1.001, r, x, q_per_p).is_nan());
        }
    }
}
