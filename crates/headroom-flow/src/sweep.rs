//! The backward/forward sweep itself.

use crate::network::{Demand, Injection, Network};

/// When a solve stops.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SolveSettings {
    /// Converged when no complex node voltage changes by more than this between sweeps, pu.
    pub tol_pu: f64,
    /// Give up after this many sweeps.
    pub max_iterations: u32,
}

impl Default for SolveSettings {
    /// 1e-9 pu, 100 sweeps.
    fn default() -> SolveSettings {
        SolveSettings {
            tol_pu: 1e-9,
            max_iterations: 100,
        }
    }
}

/// A converged solve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Converged {
    /// Sweeps used (one backward and one forward pass each).
    pub iterations: u32,
    /// Largest voltage change in the last sweep, pu.
    pub mismatch_pu: f64,
}

/// Why a solve did not converge.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NotConvergedReason {
    /// The sweep was still moving after `max_iterations`.
    IterationLimit,
    /// Voltages became non-finite, a sweep moved a voltage by more than 1 pu, or the solution
    /// settled with a node below 0.2 pu: voltage collapse or divergence.
    Diverged,
}

/// A solve that did not converge; the state is left as it was when the solve gave up.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NotConverged {
    /// Sweeps done.
    pub iterations: u32,
    /// Largest voltage change in the last sweep, pu (may be infinite or NaN when diverged).
    pub mismatch_pu: f64,
    /// Why.
    pub reason: NotConvergedReason,
}

impl std::fmt::Display for NotConverged {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.reason {
            NotConvergedReason::IterationLimit => write!(
                f,
                "load flow did not converge in {} sweeps (last voltage change {:.3e} pu)",
                self.iterations, self.mismatch_pu
            ),
            NotConvergedReason::Diverged => write!(
                f,
                "load flow diverged after {} sweeps (voltage collapse or runaway)",
                self.iterations
            ),
        }
    }
}

impl std::error::Error for NotConverged {}

/// Node voltages and branch currents of one solve, reused from solve to solve.
///
/// `j` of node `i` is the current in the branch feeding node `i`, flowing away from the head;
/// after a solve, the head's slot holds the total current its branches draw from it.
#[derive(Debug, Clone, PartialEq)]
pub struct FlowState {
    pub(crate) v_re: Vec<f64>,
    pub(crate) v_im: Vec<f64>,
    pub(crate) j_re: Vec<f64>,
    pub(crate) j_im: Vec<f64>,
}

impl FlowState {
    /// Every node at the head voltage, no current: the flat start.
    pub fn flat(network: &Network) -> FlowState {
        let n = network.n_nodes();
        FlowState {
            v_re: vec![network.head_v_pu; n],
            v_im: vec![0.0; n],
            j_re: vec![0.0; n],
            j_im: vec![0.0; n],
        }
    }

    /// A state of no nodes (a placeholder; allocates nothing).
    pub fn empty() -> FlowState {
        FlowState {
            v_re: Vec::new(),
            v_im: Vec::new(),
            j_re: Vec::new(),
            j_im: Vec::new(),
        }
    }

    /// Resets to the flat start without allocating.
    pub fn set_flat(&mut self, network: &Network) {
        self.v_re.fill(network.head_v_pu);
        self.v_im.fill(0.0);
        self.j_re.fill(0.0);
        self.j_im.fill(0.0);
    }

    /// Copies another state of the same network (a warm start) without allocating.
    ///
    /// # Panics
    /// When the two states belong to networks of different sizes.
    pub fn copy_from(&mut self, other: &FlowState) {
        self.v_re.copy_from_slice(&other.v_re);
        self.v_im.copy_from_slice(&other.v_im);
        self.j_re.copy_from_slice(&other.j_re);
        self.j_im.copy_from_slice(&other.j_im);
    }

    /// Sets every node voltage (real, imaginary, pu) from a function of the node index, for a
    /// warm start predicted by the caller. Currents are recomputed by the next solve.
    pub fn set_voltages(&mut self, mut voltage: impl FnMut(usize) -> (f64, f64)) {
        for i in 0..self.v_re.len() {
            let (re, im) = voltage(i);
            self.v_re[i] = re;
            self.v_im[i] = im;
        }
    }

    /// The node voltages (real, imaginary, pu) to write a warm start into, for a caller that
    /// fills them a stretch of nodes at a time. Currents are recomputed by the next solve.
    pub fn voltages_mut(&mut self) -> (&mut [f64], &mut [f64]) {
        (&mut self.v_re, &mut self.v_im)
    }

    /// Number of nodes.
    pub fn n_nodes(&self) -> usize {
        self.v_re.len()
    }

    /// Voltage magnitude at node `i`, pu.
    pub fn v_mag_pu(&self, i: usize) -> f64 {
        self.v_re[i].hypot(self.v_im[i])
    }

    /// Squared voltage magnitude at node `i`, pu².
    pub fn v_mag2_pu(&self, i: usize) -> f64 {
        self.v_re[i] * self.v_re[i] + self.v_im[i] * self.v_im[i]
    }

    /// Current magnitude in the branch feeding node `i`, pu (0 for the head).
    pub fn current_pu(&self, i: usize) -> f64 {
        if i == 0 {
            0.0
        } else {
            self.j_re[i].hypot(self.j_im[i])
        }
    }

    /// Real parts of the node voltages, pu.
    pub fn v_re(&self) -> &[f64] {
        &self.v_re
    }

    /// Imaginary parts of the node voltages, pu.
    pub fn v_im(&self) -> &[f64] {
        &self.v_im
    }

    /// Real parts of the feeding-branch currents, pu.
    pub fn j_re(&self) -> &[f64] {
        &self.j_re
    }

    /// Imaginary parts of the feeding-branch currents, pu.
    pub fn j_im(&self) -> &[f64] {
        &self.j_im
    }
}

/// The smallest squared voltage magnitude of the nodes below the head (pu²), in four
/// independent lanes so that the loop runs in vector registers.
fn lowest_v2(v_re: &[f64], v_im: &[f64]) -> f64 {
    const LANES: usize = 4;
    let (v_re, v_im) = (v_re.get(1..).unwrap_or(&[]), v_im.get(1..).unwrap_or(&[]));
    let v_im = &v_im[..v_re.len()];
    let mut lanes = [f64::INFINITY; LANES];
    let chunks = v_re.chunks_exact(LANES).zip(v_im.chunks_exact(LANES));
    for (re, im) in chunks {
        for l in 0..LANES {
            let m = re[l] * re[l] + im[l] * im[l];
            // A plain comparison, not f64::min: NaN is caught before this is asked.
            lanes[l] = if m < lanes[l] { m } else { lanes[l] };
        }
    }
    let whole = v_re.len() - v_re.len() % LANES;
    let mut lowest = lanes.into_iter().fold(f64::INFINITY, f64::min);
    for (re, im) in v_re[whole..].iter().zip(&v_im[whole..]) {
        lowest = lowest.min(re * re + im * im);
    }
    lowest
}

/// Nodes whose load currents the backward pass computes together.
const BLOCK: usize = 64;

fn diverged(iterations: u32, max_change2: f64, sum_change2: f64) -> NotConverged {
    NotConverged {
        iterations,
        mismatch_pu: if sum_change2.is_finite() {
            max_change2.sqrt()
        } else {
            f64::NAN
        },
        reason: NotConvergedReason::Diverged,
    }
}

/// Solves the load flow of `network` under `demand` plus `extra` injections, starting from
/// whatever `state` holds (flat or a warm start) and leaving the solution in it.
///
/// Loads are constant power. Nothing is allocated. Fails with [`NotConverged`] (never panics,
/// never returns NaN) when the sweep diverges or hits the iteration cap.
///
/// # Panics
/// When `demand` or `state` were built for a network of another size, or an injection names a
/// node outside the network.
pub fn solve(
    network: &Network,
    demand: &Demand,
    extra: &[Injection],
    state: &mut FlowState,
    settings: &SolveSettings,
) -> Result<Converged, NotConverged> {
    let n = network.n_nodes();
    assert_eq!(demand.p_pu.len(), n, "demand built for another network");
    assert_eq!(state.v_re.len(), n, "state built for another network");
    // Re-slicing everything to length n lets the compiler drop bounds checks on `i`.
    let parent = &network.parent[..n];
    let r_pu = &network.r_pu[..n];
    let x_pu = &network.x_pu[..n];
    let p_pu = &demand.p_pu[..n];
    let q_pu = &demand.q_pu[..n];
    let FlowState {
        v_re,
        v_im,
        j_re,
        j_im,
    } = state;
    let (v_re, v_im) = (&mut v_re[..n], &mut v_im[..n]);
    let (j_re, j_im) = (&mut j_re[..n], &mut j_im[..n]);
    let tol2 = settings.tol_pu * settings.tol_pu;
    v_re[0] = network.head_v_pu;
    v_im[0] = 0.0;

    let mut mismatch2 = f64::INFINITY;
    for iteration in 1..=settings.max_iterations {
        // Backward pass: load currents conj(S / V), summed toward the head. Children have higher
        // indices than their parent, so walking down the indices finishes every subtree sum
        // before it is passed up.
        j_re.fill(0.0);
        j_im.fill(0.0);
        for injection in extra {
            let k = injection.bus.index();
            if k == 0 {
                continue;
            }
            let inv = 1.0 / (v_re[k] * v_re[k] + v_im[k] * v_im[k]);
            // An injection is a negative demand.
            let (p, q) = (-injection.p_pu, -injection.q_pu);
            j_re[k] += (p * v_re[k] + q * v_im[k]) * inv;
            j_im[k] += (p * v_im[k] - q * v_re[k]) * inv;
        }
        // In depth-first order a node's parent is usually the node just before it; the current
        // handed to that parent is carried in a register instead of a store and a reload, which
        // would put the memory round trip on the critical path of every node. The loads'
        // currents, independent of one another, are computed a block at a time ahead of that
        // chain, in vector registers.
        let (mut carry_re, mut carry_im) = (0.0f64, 0.0f64);
        let mut load_re = [0.0f64; BLOCK];
        let mut load_im = [0.0f64; BLOCK];
        let mut end = n;
        while end > 1 {
            let start = end.saturating_sub(BLOCK).max(1);
            let len = end - start;
            let (lr, li) = (&mut load_re[..len], &mut load_im[..len]);
            let (vr, vi) = (&v_re[start..end], &v_im[start..end]);
            let (p, q) = (&p_pu[start..end], &q_pu[start..end]);
            for b in 0..len {
                let inv = 1.0 / (vr[b] * vr[b] + vi[b] * vi[b]);
                lr[b] = (p[b] * vr[b] + q[b] * vi[b]) * inv;
                li[b] = (p[b] * vi[b] - q[b] * vr[b]) * inv;
            }
            for i in (start..end).rev() {
                let jr = j_re[i] + carry_re + lr[i - start];
                let ji = j_im[i] + carry_im + li[i - start];
                j_re[i] = jr;
                j_im[i] = ji;
                let up = parent[i] as usize;
                if up + 1 == i {
                    (carry_re, carry_im) = (jr, ji);
                } else {
                    j_re[up] += jr;
                    j_im[up] += ji;
                    (carry_re, carry_im) = (0.0, 0.0);
                }
            }
            end = start;
        }
        j_re[0] += carry_re;
        j_im[0] += carry_im;

        // Forward pass: V_i = V_parent − Z_i · J_i, parents first.
        let mut max_change2 = 0.0f64;
        let mut sum_change2 = 0.0f64; // NaN-propagating twin of the max
        // The parent's voltage is carried in registers when it is the node just before.
        let (mut prev_re, mut prev_im) = (v_re[0], v_im[0]);
        for i in 1..n {
            let up = parent[i] as usize;
            let (ur, ui) = if up + 1 == i {
                (prev_re, prev_im)
            } else {
                (v_re[up], v_im[up])
            };
            let (r, x) = (r_pu[i], x_pu[i]);
            let (jr, ji) = (j_re[i], j_im[i]);
            let nr = ur - (r * jr - x * ji);
            let ni = ui - (r * ji + x * jr);
            let (dr, di) = (nr - v_re[i], ni - v_im[i]);
            let change2 = dr * dr + di * di;
            // A plain comparison, not f64::max: NaN is caught by the sum below.
            if change2 > max_change2 {
                max_change2 = change2;
            }
            sum_change2 += change2;
            v_re[i] = nr;
            v_im[i] = ni;
            (prev_re, prev_im) = (nr, ni);
        }
        mismatch2 = max_change2;
        // A sweep that moves a voltage by more than 1 pu is running away.
        if !sum_change2.is_finite() || max_change2 > 1.0 {
            return Err(diverged(iteration, max_change2, sum_change2));
        }
        if max_change2 <= tol2 {
            // The sweep can settle on a solution only above the nose of the curve; a collapsed
            // node (below 0.2 pu) means there is no acceptable solution.
            if lowest_v2(v_re, v_im) < 0.04 {
                return Err(diverged(iteration, max_change2, sum_change2));
            }
            return Ok(Converged {
                iterations: iteration,
                mismatch_pu: max_change2.sqrt(),
            });
        }
    }
    Err(NotConverged {
        iterations: settings.max_iterations,
        mismatch_pu: mismatch2.sqrt(),
        reason: NotConvergedReason::IterationLimit,
    })
}

/// How far [`solve_patiently`] goes past the sweep cap.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Patience {
    /// Most sweeps in all.
    pub max_sweeps: u32,
    /// A sweep that stops converging with its last change at most this (it stalls on rounding
    /// short of a very tight tolerance) counts as converged, pu. 0: never.
    pub accept_pu: f64,
}

impl Default for Patience {
    /// 10,000 sweeps; no stall accepted.
    fn default() -> Patience {
        Patience {
            max_sweeps: 10_000,
            accept_pu: 0.0,
        }
    }
}

/// Like [`solve`], but a sweep that is still converging at the cap goes on: another
/// `settings.max_iterations` sweeps at a time, as long as each such round at least halves the
/// last sweep's change, up to `patience.max_sweeps` in all. Next to the nose of the P–V curve
/// (voltage collapse) the sweep shrinks its error by a factor close to 1 per sweep, so whether
/// it converges within a fixed cap depends on how far from the solution it started; going on
/// while it converges makes "no solution" mean that the sweep stopped converging. Ordinary
/// solves stop within the first round, exactly as [`solve`] does.
///
/// The [`Converged`] or [`NotConverged`] returned counts the sweeps of every round.
pub fn solve_patiently(
    network: &Network,
    demand: &Demand,
    extra: &[Injection],
    state: &mut FlowState,
    settings: &SolveSettings,
    patience: &Patience,
) -> Result<Converged, NotConverged> {
    let mut done = 0;
    let mut last_pu = f64::INFINITY;
    loop {
        match solve(network, demand, extra, state, settings) {
            Ok(converged) => {
                return Ok(Converged {
                    iterations: done + converged.iterations,
                    ..converged
                });
            }
            Err(failed) if failed.reason == NotConvergedReason::IterationLimit => {
                done += failed.iterations;
                if failed.mismatch_pu <= patience.accept_pu {
                    return Ok(Converged {
                        iterations: done,
                        mismatch_pu: failed.mismatch_pu,
                    });
                }
                // (A NaN change is not shrinking.)
                let shrinking = failed.mismatch_pu < 0.5 * last_pu;
                if !shrinking || done >= patience.max_sweeps || failed.iterations == 0 {
                    return Err(NotConverged {
                        iterations: done,
                        ..failed
                    });
                }
                last_pu = failed.mismatch_pu;
            }
            Err(failed) => {
                return Err(NotConverged {
                    iterations: done + failed.iterations,
                    ..failed
                });
            }
        }
    }
}
