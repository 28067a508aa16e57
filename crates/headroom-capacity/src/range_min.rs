//! The node of least key over a range of node indices, in constant time (a sparse table): the
//! nodes whose path to the head leaves a given path at one of its nodes are one or two index
//! ranges, since nodes are numbered depth first.

/// Per level j and start i, the node of least key in `i..i + 2^j` (ties to the lower index).
#[derive(Debug, Clone)]
pub(crate) struct RangeArgmin {
    key: Vec<f64>,
    levels: Vec<Vec<u32>>,
}

impl RangeArgmin {
    pub(crate) fn new(key: Vec<f64>) -> RangeArgmin {
        let n = key.len();
        let mut levels = vec![(0..n as u32).collect::<Vec<u32>>()];
        let mut width = 1;
        while 2 * width <= n {
            let below = levels.last().expect("level 0 is there");
            let level = (0..=n - 2 * width)
                .map(|i| lesser(&key, below[i], below[i + width]))
                .collect();
            levels.push(level);
            width *= 2;
        }
        RangeArgmin { key, levels }
    }

    /// The node of least key in `start..end` (ties to the lower index); `None` when empty.
    pub(crate) fn least(&self, start: usize, end: usize) -> Option<u32> {
        if start >= end {
            return None;
        }
        let j = (end - start).ilog2() as usize;
        let level = &self.levels[j];
        Some(lesser(&self.key, level[start], level[end - (1 << j)]))
    }

    /// The key of node `i`.
    pub(crate) fn key(&self, i: u32) -> f64 {
        self.key[i as usize]
    }
}

/// `a` unless `b` has a strictly smaller key (`a` is the lower index).
fn lesser(key: &[f64], a: u32, b: u32) -> u32 {
    if key[b as usize] < key[a as usize] {
        b
    } else {
        a
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_range_gives_the_first_node_of_least_key() {
        let key: Vec<f64> = (0..37u32).map(|i| f64::from((i * 17 + 5) % 11)).collect();
        let table = RangeArgmin::new(key.clone());
        for start in 0..key.len() {
            assert_eq!(table.least(start, start), None);
            for end in start + 1..=key.len() {
                let mut best = start;
                for i in start..end {
                    if key[i] < key[best] {
                        best = i;
                    }
                }
                assert_eq!(table.least(start, end), Some(best as u32), "{start}..{end}");
            }
        }
    }
}
