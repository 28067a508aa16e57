//! The binding criteria named in the `limit` column, and counts per criterion.

/// The criterion that binds first at a node, as written in the `limit` column of a node table.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Limit {
    /// Some node voltage above the upper limit.
    Overvoltage,
    /// Some node voltage below the lower limit.
    Undervoltage,
    /// Some branch current above its rating.
    Thermal,
    /// Voltage change when the new generation trips.
    VoltageChange,
    /// Active power leaving the feeder at the head.
    ReverseFlow,
    /// The load flow did not converge.
    NotConverged,
    /// Nothing bound up to the search ceiling `max_kw`.
    SearchMax,
}

impl Limit {
    /// Every criterion, in the order of the output contract.
    pub const ALL: [Limit; 7] = [
        Limit::Overvoltage,
        Limit::Undervoltage,
        Limit::Thermal,
        Limit::VoltageChange,
        Limit::ReverseFlow,
        Limit::NotConverged,
        Limit::SearchMax,
    ];

    /// The name as written in the tables, e.g. `voltage_change`.
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

    /// Parses the table name; `None` for anything else.
    pub fn parse(name: &str) -> Option<Limit> {
        Limit::ALL.into_iter().find(|l| l.as_str() == name)
    }

    fn index(self) -> usize {
        self as usize
    }
}

/// Number of nodes per binding criterion.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct LimitCounts {
    counts: [u64; 7],
}

impl LimitCounts {
    /// Counts one more node bound by `limit`.
    pub fn add(&mut self, limit: Limit) {
        self.counts[limit.index()] += 1;
    }

    /// Adds every count of `other`.
    pub fn merge(&mut self, other: &LimitCounts) {
        for (a, b) in self.counts.iter_mut().zip(other.counts) {
            *a += b;
        }
    }

    /// Nodes bound by `limit`.
    pub fn get(&self, limit: Limit) -> u64 {
        self.counts[limit.index()]
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
