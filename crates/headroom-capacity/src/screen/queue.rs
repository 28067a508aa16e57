//! A queue of applications decided in order: each accepted plant becomes existing generation
//! for the applications after it; a refused one leaves the network as it was.

use rayon::prelude::*;
use serde::Serialize;

use headroom_flow::SolveSettings;
use headroom_model::{BusIdx, Feeder, Study};

use super::application::{Application, ApplicationDate};
use super::check::{CheckOptions, Verdict, check_application};
use crate::criteria::Limit;
use crate::prepare::FeederStudy;

/// One application of a queue, with where it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct QueuedApplication {
    /// Index of its feeder in the feeders given to [`run_queue`].
    pub feeder: usize,
    /// The application.
    pub application: Application,
    /// Date received, when the queue gives dates.
    pub date: Option<ApplicationDate>,
    /// 1-based line in the queue file (0 when not read from a file).
    pub line: usize,
}

/// The decision on one application of a queue.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Decision {
    /// Position in the processing order, from 1.
    pub order: usize,
    /// The application's reference.
    pub id: String,
    /// Feeder id.
    pub feeder: String,
    /// Node id.
    pub node: String,
    /// Requested export, kW.
    pub kw: f64,
    /// Power factor.
    pub power_factor: f64,
    /// Whether the plant absorbs reactive power.
    pub absorbing: bool,
    /// Date received, when given.
    pub date: Option<ApplicationDate>,
    /// Line in the queue file.
    pub line: usize,
    /// Accept or refuse.
    pub verdict: Verdict,
    /// Capacity left at the node at the time of the decision (with every plant accepted
    /// before it), in the deciding scenario, kW.
    pub hosting_kw: f64,
    /// `hosting_kw − kw`, kW.
    pub margin_kw: f64,
    /// What binds in the deciding scenario.
    pub limit: Limit,
    /// Where.
    pub limit_element: Option<String>,
    /// The deciding scenario.
    pub scenario: String,
}

/// Every decision of a queue, in processing order, with totals.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct QueueOutcome {
    /// One per application, in the order they were decided.
    pub decisions: Vec<Decision>,
    /// Applications accepted.
    pub accepted: usize,
    /// Applications refused.
    pub refused: usize,
    /// Export accepted, kW.
    pub accepted_kw: f64,
    /// Export refused, kW.
    pub refused_kw: f64,
    /// Load flows solved, base cases included.
    pub load_flows: u64,
}

/// Decides `queue` in the order given (see [`crate::parse_queue`] for the file order and the
/// date rule). Each application is checked with [`check_application`] against the feeder as
/// it stands after the applications accepted before it; an accepted plant is then added as
/// existing generation at its rated export and power factor, scaled in each scenario by its
/// `gen_scale` like the feeder's own generation ([`FeederStudy::prepare_with`]). Feeders are
/// electrically separate, so their queues run side by side; within a feeder, strictly in order.
///
/// # Panics
/// When an entry names a feeder outside `feeders`, or breaks a precondition of
/// [`check_application`].
pub fn run_queue(
    feeders: &[Feeder],
    study: &Study,
    queue: &[QueuedApplication],
    options: &CheckOptions,
) -> QueueOutcome {
    let mut by_feeder: Vec<Vec<usize>> = vec![Vec::new(); feeders.len()];
    for (k, entry) in queue.iter().enumerate() {
        by_feeder[entry.feeder].push(k);
    }
    let decided: Vec<(Vec<(usize, Decision)>, u64)> = by_feeder
        .par_iter()
        .enumerate()
        .filter(|(_, entries)| !entries.is_empty())
        .map(|(f, entries)| decide_feeder(&feeders[f], study, queue, entries, options))
        .collect();
    let mut load_flows = 0;
    let mut decisions: Vec<(usize, Decision)> = Vec::with_capacity(queue.len());
    for (part, flows) in decided {
        decisions.extend(part);
        load_flows += flows;
    }
    decisions.sort_by_key(|(k, _)| *k);
    let decisions: Vec<Decision> = decisions.into_iter().map(|(_, d)| d).collect();
    let (mut accepted, mut refused, mut accepted_kw, mut refused_kw) = (0, 0, 0.0, 0.0);
    for d in &decisions {
        match d.verdict {
            Verdict::Accept => {
                accepted += 1;
                accepted_kw += d.kw;
            }
            Verdict::Refuse => {
                refused += 1;
                refused_kw += d.kw;
            }
        }
    }
    QueueOutcome {
        decisions,
        accepted,
        refused,
        accepted_kw,
        refused_kw,
        load_flows,
    }
}

/// The applications of one feeder, in order.
fn decide_feeder(
    feeder: &Feeder,
    study: &Study,
    queue: &[QueuedApplication],
    entries: &[usize],
    options: &CheckOptions,
) -> (Vec<(usize, Decision)>, u64) {
    let n_scenarios = study.scenarios.len() as u64;
    let mut prepared = FeederStudy::prepare(feeder, study);
    let mut load_flows = n_scenarios;
    let mut accepted: Vec<(BusIdx, f64, f64)> = Vec::new();
    let mut decisions = Vec::with_capacity(entries.len());
    for &k in entries {
        let entry = &queue[k];
        let application = &entry.application;
        let report = check_application(&prepared, application, options);
        load_flows += u64::from(report.load_flows);
        if report.verdict == Verdict::Accept {
            accepted.push((application.bus, application.p_kw, application.q_kvar()));
            prepared =
                FeederStudy::prepare_with(feeder, study, SolveSettings::default(), &accepted);
            load_flows += n_scenarios;
        }
        decisions.push((
            k,
            Decision {
                order: k + 1,
                id: application.id.clone(),
                feeder: feeder.id().to_string(),
                node: report.node,
                kw: application.p_kw,
                power_factor: application.generation.power_factor,
                absorbing: application.generation.absorbing,
                date: entry.date,
                line: entry.line,
                verdict: report.verdict,
                hosting_kw: report.hosting_kw,
                margin_kw: report.margin_kw,
                limit: report.limit,
                limit_element: report.limit_element,
                scenario: report.deciding_scenario,
            },
        ));
    }
    (decisions, load_flows)
}
