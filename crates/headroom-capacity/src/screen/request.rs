//! One load flow at the requested export: what the network looks like with the plant, and
//! which criteria it breaks.

use headroom_model::BusIdx;

use crate::criteria::{ALL, Element, Limit, Snapshot};
use crate::prepare::FeederStudy;

/// The solved injection of one request in one scenario.
#[derive(Debug, Clone)]
pub(crate) struct SolvedRequest {
    /// What the criteria see; `None` when the base case or this load flow did not converge.
    pub snapshot: Option<Snapshot>,
    /// Criteria violated (bits of [`crate::criteria`]); 0 when not converged.
    pub mask: u8,
    /// Load flows solved.
    pub load_flows: u32,
}

/// Solves scenario `s` of `study` with `p_kw` of new generation at `bus`, reactive power
/// `p_kw · q_per_p`, exactly as the capacity searches solve an injection (same warm start, same
/// staged tolerances), so a check and a map see the same numbers.
pub(crate) fn solve_request(
    study: &FeederStudy<'_>,
    s: usize,
    bus: BusIdx,
    p_kw: f64,
    q_per_p: f64,
) -> SolvedRequest {
    if study.cases[s].base_result.is_err() {
        return SolvedRequest {
            snapshot: None,
            mask: 0,
            load_flows: 0,
        };
    }
    let (mask, snapshot, load_flows) = study.solve_injection(s, bus, p_kw, q_per_p);
    SolvedRequest {
        snapshot,
        mask,
        load_flows,
    }
}

/// One criterion beyond its threshold at the requested export: how many elements, and the
/// worst one in engineering units.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Breach {
    pub limit: Limit,
    pub count: usize,
    pub worst: Element,
    pub value: f64,
    pub threshold: f64,
}

/// Every criterion beyond its threshold in `at` (same thresholds as the searches: "beyond the
/// limit and worse than at P = 0"), in the order of [`Limit::ALL`].
pub(crate) fn breaches(study: &FeederStudy<'_>, s: usize, at: &Snapshot) -> Vec<Breach> {
    let case = &study.cases[s];
    let i_base_a = study.network.i_base_a();
    let mut found: Vec<(Breach, f64)> = Vec::new();
    case.thresholds
        .for_each_quantity(ALL, &case.snapshot, at, |limit, element, q, t| {
            if q <= t {
                return;
            }
            // Back from the "upper" form to engineering units.
            let (value, threshold) = match limit {
                Limit::Undervoltage => (-q, -t),
                Limit::Thermal => (q * i_base_a, t * i_base_a),
                Limit::ReverseFlow => (study.network.pu_to_kw(-q), study.network.pu_to_kw(-t)),
                _ => (q, t),
            };
            let excess = q - t;
            match found.iter_mut().find(|(b, _)| b.limit == limit) {
                Some((b, worst_excess)) => {
                    b.count += 1;
                    if excess > *worst_excess {
                        *worst_excess = excess;
                        b.worst = element;
                        b.value = value;
                        b.threshold = threshold;
                    }
                }
                None => found.push((
                    Breach {
                        limit,
                        count: 1,
                        worst: element,
                        value,
                        threshold,
                    },
                    excess,
                )),
            }
        });
    let mut found: Vec<Breach> = found.into_iter().map(|(b, _)| b).collect();
    found.sort_by_key(|b| b.limit);
    found
}

/// Unit of a breach's value and threshold.
pub(crate) fn unit(limit: Limit) -> &'static str {
    match limit {
        Limit::Overvoltage | Limit::Undervoltage | Limit::VoltageChange => "pu",
        Limit::Thermal => "A",
        Limit::ReverseFlow => "kW",
        Limit::NotConverged | Limit::SearchMax => "",
    }
}
