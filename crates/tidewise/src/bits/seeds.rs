//! Replicates: the training seed and split seed of one paired run (both arms share them).
//!
//! Every set the command uses (the search's, each confirmation round's, the re-check's) is
//! derived from `run.seed` alone, by a SplitMix64 hash of `(run.seed, role, index)`, and the
//! sets are made disjoint by construction: a derived seed already taken by an earlier set is
//! skipped. So the confirmation never sees a seed the search chose with, and the same spec
//! always gets the same replicates. Seeds are 31-bit, so they fit every spec key (TOML
//! integers are signed 64-bit) and every JSON reader.

use std::collections::BTreeSet;

use serde::Serialize;

/// One paired run's seeds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub struct Replicate {
    /// `run.seed`: initialisation, sample order, noise, rounding.
    pub seed: u64,
    /// `data.split_seed`: which samples are held out (for the `pump` generator, also which
    /// samples are made).
    pub split: u64,
}

/// What a set of replicates is for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Role {
    /// Exploring candidate designs.
    Search,
    /// Confirmation round `r` (0-based).
    Confirm(u32),
    /// The re-check of the final design (reported, never used to decide).
    Recheck,
}

impl Role {
    fn tag(self) -> u64 {
        match self {
            Role::Search => 1,
            Role::Recheck => 2,
            Role::Confirm(r) => 16 + u64::from(r),
        }
    }
}

fn splitmix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

fn derive(base: u64, tag: u64, index: u64, salt: u64) -> u64 {
    splitmix(splitmix(splitmix(base ^ salt).wrapping_add(tag)).wrapping_add(index)) >> 33
}

/// Hands out disjoint replicate sets.
#[derive(Clone, Debug)]
pub struct Seeds {
    base_seed: u64,
    base_split: u64,
    vary_split: bool,
    used: BTreeSet<u64>,
    used_splits: BTreeSet<u64>,
}

impl Seeds {
    /// Sets derived from `run.seed = base_seed`; with `vary_split` every replicate also gets a
    /// split seed of its own (derived the same way), else all use `base_split`.
    pub fn new(base_seed: u64, base_split: u64, vary_split: bool) -> Seeds {
        Seeds {
            base_seed,
            base_split,
            vary_split,
            used: BTreeSet::new(),
            used_splits: BTreeSet::new(),
        }
    }

    /// The `count` replicates of `role`, none sharing a seed (or, when splits vary, a split
    /// seed) with any set handed out before. Call in a fixed order for fixed results.
    pub fn take(&mut self, role: Role, count: usize) -> Vec<Replicate> {
        let mut out = Vec::with_capacity(count);
        let mut i = 0u64;
        while out.len() < count {
            let seed = derive(self.base_seed, role.tag(), i, 0x5eed);
            let split = if self.vary_split {
                derive(self.base_seed, role.tag(), i, 0x5b17)
            } else {
                self.base_split
            };
            i += 1;
            if self.used.contains(&seed) || (self.vary_split && self.used_splits.contains(&split)) {
                continue;
            }
            self.used.insert(seed);
            if self.vary_split {
                self.used_splits.insert(split);
            }
            out.push(Replicate { seed, split });
        }
        out
    }

    /// Whether `seed` was handed out.
    pub fn is_used(&self, seed: u64) -> bool {
        self.used.contains(&seed)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sets_are_disjoint_and_deterministic() {
        let mut s = Seeds::new(1, 7, true);
        let a = s.take(Role::Search, 8);
        let b = s.take(Role::Confirm(0), 16);
        let c = s.take(Role::Confirm(1), 16);
        let mut all: Vec<u64> = a.iter().chain(&b).chain(&c).map(|r| r.seed).collect();
        let splits: BTreeSet<u64> = a.iter().chain(&b).chain(&c).map(|r| r.split).collect();
        all.sort_unstable();
        all.dedup();
        assert_eq!(all.len(), 40);
        assert_eq!(splits.len(), 40);
        assert!(all.iter().all(|&x| x < 1 << 31));
        let mut again = Seeds::new(1, 7, true);
        assert_eq!(again.take(Role::Search, 8), a);
        // Fixed splits keep the spec's.
        let mut f = Seeds::new(1, 7, false);
        assert!(f.take(Role::Search, 4).iter().all(|r| r.split == 7));
        // Another run.seed, other replicates.
        assert_ne!(Seeds::new(2, 7, true).take(Role::Search, 8), a);
    }
}
