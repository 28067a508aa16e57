//! Shards: a deterministic share of a region's feeders for one of several processes.
//!
//! A run split into `N` shards gives shard `I` (1-based, `1 ≤ I ≤ N`) every feeder whose id
//! hashes to it: `FNV-1a-64(id) mod N + 1`. The rule looks at the feeder id alone, so it is the
//! same on every machine and in every run, does not depend on which other feeders exist, and a
//! feeder added to the region never moves the others between shards.
//!
//! Schedulers start the processes of a job array with an index in the environment.
//! [`shard_from_environment`] turns that into a [`Shard`]: an explicit shard first, then a Slurm
//! job array (`SLURM_ARRAY_TASK_ID`, normalised with `SLURM_ARRAY_TASK_MIN` and
//! `SLURM_ARRAY_TASK_STEP`, the count from `SLURM_ARRAY_TASK_COUNT`), then a Kubernetes Indexed
//! Job (`JOB_COMPLETION_INDEX`, 0-based, with the count given by the caller or by
//! [`SHARD_COUNT_VARIABLE`]). It reads variables through a lookup function, never the process
//! environment itself, so it can be tested with any set of values.

use std::fmt;

/// Environment variable giving the number of shards next to `JOB_COMPLETION_INDEX` (a
/// Kubernetes Indexed Job sets the index but not the count).
pub const SHARD_COUNT_VARIABLE: &str = "HEADROOM_SHARD_COUNT";

/// Most shards a run may be split into.
pub const MAX_SHARDS: u32 = 100_000;

/// One share of a run: shard `index` of `count`, 1-based.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Shard {
    index: u32,
    count: u32,
}

/// Why a shard could not be made from an argument or the environment.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum ShardError {
    /// The text is not of the form `I/N`.
    #[error(
        "{text:?} is not a shard: write I/N with whole numbers, e.g. 2/3 for the second of three"
    )]
    Syntax {
        /// The text given.
        text: String,
    },
    /// The index or count is out of range.
    #[error(
        "shard {index}/{count} does not exist: the index runs from 1 to the count (at most {MAX_SHARDS})"
    )]
    OutOfRange {
        /// The 1-based index.
        index: u64,
        /// The count.
        count: u64,
    },
    /// An environment variable holds something that is not a whole number.
    #[error("{variable}={value:?} is not a whole number")]
    NotANumber {
        /// The variable.
        variable: &'static str,
        /// Its value.
        value: String,
    },
    /// A variable needed with another one is missing.
    #[error("{present} is set but {missing} is not: {hint}")]
    Missing {
        /// The variable that is set.
        present: &'static str,
        /// The one that is needed with it.
        missing: &'static str,
        /// What to do about it.
        hint: &'static str,
    },
    /// The Slurm task id does not sit on the array's contiguous range.
    #[error(
        "SLURM_ARRAY_TASK_ID={task_id} is not on the array's range (first {task_min}, step {task_step}, \
         {task_count} tasks): run the array as a contiguous range such as --array=0-{last} or give --shard I/N"
    )]
    SlurmNotContiguous {
        /// `SLURM_ARRAY_TASK_ID`.
        task_id: u64,
        /// `SLURM_ARRAY_TASK_MIN`.
        task_min: u64,
        /// `SLURM_ARRAY_TASK_STEP` (1 when unset).
        task_step: u64,
        /// `SLURM_ARRAY_TASK_COUNT`.
        task_count: u64,
        /// The last id of a 0-based range of that many tasks.
        last: u64,
    },
    /// Two sources give different counts.
    #[error("{first} says {first_count} shards but {second} says {second_count}")]
    CountMismatch {
        /// Where the first count comes from.
        first: &'static str,
        /// Its value.
        first_count: u64,
        /// Where the second comes from.
        second: &'static str,
        /// Its value.
        second_count: u64,
    },
}

impl Shard {
    /// Shard `index` of `count` (1-based).
    pub fn new(index: u32, count: u32) -> Result<Shard, ShardError> {
        Shard::checked(u64::from(index), u64::from(count))
    }

    fn checked(index: u64, count: u64) -> Result<Shard, ShardError> {
        if index == 0 || count == 0 || index > count || count > u64::from(MAX_SHARDS) {
            return Err(ShardError::OutOfRange { index, count });
        }
        // Both fit: count ≤ MAX_SHARDS and index ≤ count.
        Ok(Shard {
            index: index as u32,
            count: count as u32,
        })
    }

    /// Parses `I/N` (spaces around the numbers allowed).
    pub fn parse(text: &str) -> Result<Shard, ShardError> {
        let syntax = || ShardError::Syntax {
            text: text.to_string(),
        };
        let (index, count) = text.split_once('/').ok_or_else(syntax)?;
        let number = |s: &str| s.trim().parse::<u64>().map_err(|_| syntax());
        Shard::checked(number(index)?, number(count)?)
    }

    /// The whole run as one shard.
    pub fn whole() -> Shard {
        Shard { index: 1, count: 1 }
    }

    /// The 1-based index.
    pub fn index(self) -> u32 {
        self.index
    }

    /// The number of shards.
    pub fn count(self) -> u32 {
        self.count
    }

    /// True when this is the only shard (the whole run).
    pub fn is_whole(self) -> bool {
        self.count == 1
    }

    /// The shard (1-based) that feeder `feeder_id` belongs to when the run is split `count`
    /// ways: `fnv1a_64(id) mod count + 1`.
    ///
    /// # Panics
    /// When `count` is 0.
    pub fn of_feeder(feeder_id: &str, count: u32) -> u32 {
        assert!(count > 0, "a run has at least one shard");
        (fnv1a_64(feeder_id.as_bytes()) % u64::from(count)) as u32 + 1
    }

    /// True when feeder `feeder_id` belongs to this shard.
    pub fn contains(self, feeder_id: &str) -> bool {
        Shard::of_feeder(feeder_id, self.count) == self.index
    }

    /// What output file names carry: `-shard-I-of-N`, or nothing for the whole run.
    pub fn file_suffix(self) -> String {
        if self.is_whole() {
            String::new()
        } else {
            format!("-shard-{}-of-{}", self.index, self.count)
        }
    }
}

impl fmt::Display for Shard {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

/// 64-bit FNV-1a hash of `bytes`: simple, stable across platforms and versions.
pub fn fnv1a_64(bytes: &[u8]) -> u64 {
    const OFFSET_BASIS: u64 = 0xcbf2_9ce4_8422_2325;
    const PRIME: u64 = 0x0000_0100_0000_01b3;
    let mut hash = OFFSET_BASIS;
    for &byte in bytes {
        hash ^= u64::from(byte);
        hash = hash.wrapping_mul(PRIME);
    }
    hash
}

/// Where a run's shard came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ShardSource {
    /// The `--shard I/N` argument.
    Argument,
    /// A Slurm job array.
    Slurm {
        /// `SLURM_ARRAY_TASK_ID`.
        task_id: u64,
        /// `SLURM_ARRAY_TASK_MIN` (the array's first id).
        task_min: u64,
        /// `SLURM_ARRAY_TASK_STEP` (1 when unset).
        task_step: u64,
    },
    /// A Kubernetes Indexed Job.
    Kubernetes {
        /// `JOB_COMPLETION_INDEX` (0-based).
        completion_index: u64,
        /// Where the count came from: `--shard-count` or [`SHARD_COUNT_VARIABLE`].
        count_from: &'static str,
    },
}

impl fmt::Display for ShardSource {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ShardSource::Argument => write!(f, "--shard"),
            ShardSource::Slurm {
                task_id,
                task_min,
                task_step,
            } => {
                write!(
                    f,
                    "Slurm job array: SLURM_ARRAY_TASK_ID={task_id}, first id {task_min}"
                )?;
                if *task_step != 1 {
                    write!(f, ", step {task_step}")?;
                }
                Ok(())
            }
            ShardSource::Kubernetes {
                completion_index,
                count_from,
            } => write!(
                f,
                "Kubernetes Indexed Job: JOB_COMPLETION_INDEX={completion_index}, count from {count_from}"
            ),
        }
    }
}

/// The shard of this run: `argument` when given, else a Slurm job array, else a Kubernetes
/// Indexed Job, else `None` (the whole run). `shard_count` is the `--shard-count` argument (the
/// count next to `JOB_COMPLETION_INDEX`; with Slurm it must agree with the array's count).
/// `variable` looks up an environment variable.
///
/// Slurm: `I = (SLURM_ARRAY_TASK_ID − SLURM_ARRAY_TASK_MIN) / SLURM_ARRAY_TASK_STEP + 1` and
/// `N = SLURM_ARRAY_TASK_COUNT`, so `--array=0-2` and `--array=1-3` both give shards 1/3 to
/// 3/3. Kubernetes: `I = JOB_COMPLETION_INDEX + 1`.
pub fn shard_from_environment(
    argument: Option<Shard>,
    shard_count: Option<u32>,
    variable: &dyn Fn(&str) -> Option<String>,
) -> Result<Option<(Shard, ShardSource)>, ShardError> {
    if let Some(shard) = argument {
        return Ok(Some((shard, ShardSource::Argument)));
    }
    let number = |name: &'static str| -> Result<Option<u64>, ShardError> {
        match variable(name) {
            None => Ok(None),
            Some(value) if value.trim().is_empty() => Ok(None),
            Some(value) => {
                value
                    .trim()
                    .parse::<u64>()
                    .map(Some)
                    .map_err(|_| ShardError::NotANumber {
                        variable: name,
                        value,
                    })
            }
        }
    };
    if let Some(task_id) = number("SLURM_ARRAY_TASK_ID")? {
        let task_min = number("SLURM_ARRAY_TASK_MIN")?.ok_or(ShardError::Missing {
            present: "SLURM_ARRAY_TASK_ID",
            missing: "SLURM_ARRAY_TASK_MIN",
            hint: "without the array's first id the shard index is ambiguous; give --shard I/N",
        })?;
        let task_step = number("SLURM_ARRAY_TASK_STEP")?.unwrap_or(1).max(1);
        let task_count = match number("SLURM_ARRAY_TASK_COUNT")? {
            Some(count) => count,
            None => match number("SLURM_ARRAY_TASK_MAX")? {
                Some(task_max) if task_max >= task_min => (task_max - task_min) / task_step + 1,
                _ => {
                    return Err(ShardError::Missing {
                        present: "SLURM_ARRAY_TASK_ID",
                        missing: "SLURM_ARRAY_TASK_COUNT",
                        hint: "the number of shards is unknown; give --shard I/N",
                    });
                }
            },
        };
        let off_range = task_id < task_min || !(task_id - task_min).is_multiple_of(task_step);
        let index = if off_range {
            u64::MAX
        } else {
            (task_id - task_min) / task_step + 1
        };
        if index > task_count {
            return Err(ShardError::SlurmNotContiguous {
                task_id,
                task_min,
                task_step,
                task_count,
                last: task_count.saturating_sub(1),
            });
        }
        if let Some(count) = shard_count
            && u64::from(count) != task_count
        {
            return Err(ShardError::CountMismatch {
                first: "SLURM_ARRAY_TASK_COUNT",
                first_count: task_count,
                second: "--shard-count",
                second_count: u64::from(count),
            });
        }
        let shard = Shard::checked(index, task_count)?;
        let source = ShardSource::Slurm {
            task_id,
            task_min,
            task_step,
        };
        return Ok(Some((shard, source)));
    }
    if let Some(completion_index) = number("JOB_COMPLETION_INDEX")? {
        let from_variable = number(SHARD_COUNT_VARIABLE)?;
        let (count, count_from) = match (shard_count, from_variable) {
            (Some(count), Some(other)) if u64::from(count) != other => {
                return Err(ShardError::CountMismatch {
                    first: "--shard-count",
                    first_count: u64::from(count),
                    second: SHARD_COUNT_VARIABLE,
                    second_count: other,
                });
            }
            (Some(count), _) => (u64::from(count), "--shard-count"),
            (None, Some(count)) => (count, SHARD_COUNT_VARIABLE),
            (None, None) => {
                return Err(ShardError::Missing {
                    present: "JOB_COMPLETION_INDEX",
                    missing: "the shard count",
                    hint: "give --shard-count N or set HEADROOM_SHARD_COUNT to the Job's completions",
                });
            }
        };
        let shard = Shard::checked(completion_index.saturating_add(1), count)?;
        let source = ShardSource::Kubernetes {
            completion_index,
            count_from,
        };
        return Ok(Some((shard, source)));
    }
    if shard_count.is_some() {
        return Err(ShardError::Missing {
            present: "--shard-count",
            missing: "JOB_COMPLETION_INDEX",
            hint: "--shard-count goes with a Kubernetes Indexed Job; elsewhere give --shard I/N",
        });
    }
    Ok(None)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fnv1a_matches_the_published_test_vectors() {
        assert_eq!(fnv1a_64(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv1a_64(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv1a_64(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn every_feeder_falls_in_exactly_one_shard() {
        for count in 1..=7 {
            for i in 0..50 {
                let id = format!("feeder-{i}");
                let owners: Vec<u32> = (1..=count)
                    .filter(|&index| Shard::new(index, count).unwrap().contains(&id))
                    .collect();
                assert_eq!(owners.len(), 1, "{id} in {count} shards: {owners:?}");
                assert_eq!(owners[0], Shard::of_feeder(&id, count));
            }
        }
    }
}
