//! The binding criteria named in the `limit` column, and counts per criterion.

/// The criterion that binds first at a node, as written in the `limit` column of a node table
/// (the capacity crate's own type, so names and order cannot drift apart).
pub use headroom_capacity::Limit;

/// Number of nodes per binding criterion.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct LimitCounts {
    counts: [u64; 7],
}

impl LimitCounts {
    /// Counts one more node bound by `limit`.
    pub fn add(&mut self, limit: Limit) {
        self.counts[limit as usize] += 1;
    }

    /// Adds every count of `other`.
    pub fn merge(&mut self, other: &LimitCounts) {
        for (a, b) in self.counts.iter_mut().zip(other.counts) {
            *a += b;
        }
    }

    /// Nodes bound by `limit`.
    pub fn get(&self, limit: Limit) -> u64 {
        self.counts[limit as usize]
    }

    /// Nodes counted in all.
    pub fn total(&self) -> u64 {
        self.counts.iter().sum()
    }

    /// The criteria with at least one node, in contract order, with their counts.
    pub fn nonzero(&self) -> Vec<(Limit, u64)> {
        Limit::ALL
            .into_iter()
            .map(|l| (l, self.get(l)))
            .filter(|&(_, n)| n > 0)
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_unknown_names_are_refused() {
        for limit in Limit::ALL {
            assert_eq!(Limit::parse(limit.as_str()), Some(limit));
        }
        assert_eq!(Limit::parse("Thermal"), None);
        assert_eq!(Limit::parse(""), None);
    }

    #[test]
    fn counts_add_merge_and_list_nonzero_in_contract_order() {
        let mut a = LimitCounts::default();
        a.add(Limit::Thermal);
        a.add(Limit::Overvoltage);
        a.add(Limit::Thermal);
        let mut b = LimitCounts::default();
        b.add(Limit::SearchMax);
        a.merge(&b);
        assert_eq!(a.total(), 4);
        assert_eq!(
            a.nonzero(),
            vec![
                (Limit::Overvoltage, 1),
                (Limit::Thermal, 2),
                (Limit::SearchMax, 1)
            ]
        );
    }
}
