//! Streaming map: feeders loaded, solved and handed on one at a time, so that memory does not
//! grow with the number of feeders.
//!
//! [`map_stream`] keeps at most `feeders_in_flight` feeders in memory. Each in-flight feeder has
//! a driver thread of its own that loads it, hands its (scenario, node) searches to the rayon
//! pool, and passes the finished [`FeederMap`] to the caller's `finish` (which writes it out,
//! say) before it takes the next feeder. Loading and writing one feeder thus overlap with the
//! searches of another. The drivers are plain threads, not pool tasks, so a pool thread that
//! waits never picks up a whole other feeder.

use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use headroom_model::{Feeder, Study};
use rayon::ThreadPool;

use crate::run::{FeederMap, RunStats, map_feeder};
use crate::search::CapacityOptions;

/// What [`map_stream`] works through.
pub struct StreamJob<'a, E> {
    /// Number of feeders; they are named by their index `0..n_feeders`.
    pub n_feeders: usize,
    /// Most feeders loaded at the same time (at least 1).
    pub feeders_in_flight: usize,
    /// The study.
    pub study: &'a Study,
    /// Search options.
    pub options: &'a CapacityOptions,
    /// Loads feeder `i`.
    pub load: &'a (dyn Fn(usize) -> Result<Feeder, E> + Sync),
    /// Called with the number of node answers finished since its last call (any thread).
    pub progress: &'a (dyn Fn(u64) + Sync),
    /// Called once per feeder, with its index, map and counts, as soon as it is solved (from a
    /// driver thread; feeders finish in any order).
    pub finish: &'a (dyn Fn(usize, &FeederMap<'_>, &RunStats) -> Result<(), E> + Sync),
}

/// Maps every feeder of `job` on `pool` (see the module docs) and returns the counts of all of
/// them. Feeders are started in index order. On the first error of `load` or `finish`, no further
/// feeder is started, the feeders in flight are completed, and the error of the lowest feeder
/// index is returned.
///
/// The answers of each feeder are those of [`map_feeder`]: the same whatever the number of
/// threads or feeders in flight.
pub fn map_stream<E: Send>(job: &StreamJob<'_, E>, pool: &ThreadPool) -> Result<RunStats, E> {
    let next = AtomicUsize::new(0);
    let stop = AtomicBool::new(false);
    let total = Mutex::new(RunStats::default());
    let first_error: Mutex<Option<(usize, E)>> = Mutex::new(None);
    let n_drivers = job.feeders_in_flight.max(1).min(job.n_feeders.max(1));
    let record_error = |i: usize, error: E| {
        let mut slot = first_error.lock().unwrap_or_else(|p| p.into_inner());
        if slot.as_ref().is_none_or(|(j, _)| i < *j) {
            *slot = Some((i, error));
        }
        stop.store(true, Ordering::SeqCst);
    };
    std::thread::scope(|scope| {
        for _ in 0..n_drivers {
            scope.spawn(|| {
                loop {
                    if stop.load(Ordering::SeqCst) {
                        break;
                    }
                    let i = next.fetch_add(1, Ordering::SeqCst);
                    if i >= job.n_feeders {
                        break;
                    }
                    let feeder = match (job.load)(i) {
                        Ok(feeder) => feeder,
                        Err(error) => {
                            record_error(i, error);
                            break;
                        }
                    };
                    let (map, stats) =
                        pool.install(|| map_feeder(&feeder, job.study, job.options, job.progress));
                    if let Err(error) = (job.finish)(i, &map, &stats) {
                        record_error(i, error);
                        break;
                    }
                    total.lock().unwrap_or_else(|p| p.into_inner()).add(&stats);
                }
            });
        }
    });
    match first_error.into_inner().unwrap_or_else(|p| p.into_inner()) {
        Some((_, error)) => Err(error),
        None => Ok(total.into_inner().unwrap_or_else(|p| p.into_inner())),
    }
}
