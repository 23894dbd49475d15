//! Runs of the search: the float reference once per seed, fixed-arm runs cached by design
//! point and seed (runs are deterministic, so a cached result is the result), in parallel.

use std::collections::HashMap;

use rayon::prelude::*;

use super::observe::{RangeObserver, Ranges};
use super::{BitsError, GapStats, Point};
use crate::arms::{self, NoObserver, Prepared};
use crate::spec::{Design, Spec};

/// Test samples the range observer runs at each float checkpoint.
const OBSERVED_SAMPLES: usize = 512;

/// A run's key and outcome.
type Keyed = ((Point, u64), Outcome);

/// What the search keeps of one fixed-arm run.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Outcome {
    /// Final test accuracy, a fraction.
    pub fixed_accuracy: f64,
    /// Saturation events, all epochs.
    pub saturations: u64,
    /// Updates lost to rounding, all epochs.
    pub lost_updates: u64,
    /// Updates attempted, all epochs.
    pub updates: u64,
}

/// Why runs were made: the search itself, or the plot's scan.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Purpose {
    /// Runs the recommendation depends on.
    Search,
    /// Extra runs for the accuracy-against-width plot.
    Scan,
}

/// The run cache and the worker pool.
pub struct Runner<'a> {
    spec: &'a Spec,
    design: &'a Design,
    prepared: &'a Prepared,
    pool: rayon::ThreadPool,
    float: HashMap<u64, f64>,
    cache: HashMap<(Point, u64), Outcome>,
    /// Every fixed run in the order it was made: `(point, seed, outcome, purpose)`.
    pub log: Vec<(Point, u64, Outcome, Purpose)>,
    /// Fixed-arm runs made for the search.
    pub search_runs: usize,
    /// Fixed-arm runs made for the scan.
    pub scan_runs: usize,
    /// Float-arm runs.
    pub float_runs: usize,
}

impl<'a> Runner<'a> {
    /// A runner with `jobs` worker threads.
    pub fn new(
        spec: &'a Spec,
        design: &'a Design,
        prepared: &'a Prepared,
        jobs: usize,
    ) -> Result<Runner<'a>, BitsError> {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(jobs)
            .build()
            .map_err(|e| BitsError::Options(format!("cannot start {jobs} worker threads: {e}")))?;
        Ok(Runner {
            spec,
            design,
            prepared,
            pool,
            float: HashMap::new(),
            cache: HashMap::new(),
            log: Vec::new(),
            search_runs: 0,
            scan_runs: 0,
            float_runs: 0,
        })
    }

    fn spec_for(spec: &Spec, seed: u64) -> Spec {
        let mut s = spec.clone();
        s.run.seed = seed;
        s
    }

    /// Runs the float arm of every seed (once), returning the ranges it visited.
    pub fn floats(&mut self, seeds: &[u64]) -> Result<Ranges, BitsError> {
        let (spec, design, prepared) = (self.spec, self.design, self.prepared);
        let todo: Vec<u64> = seeds
            .iter()
            .copied()
            .filter(|s| !self.float.contains_key(s))
            .collect();
        let results: Vec<Result<(u64, f64, Ranges), BitsError>> = self.pool.install(|| {
            todo.par_iter()
                .map(|&seed| {
                    let s = Self::spec_for(spec, seed);
                    let mut obs = RangeObserver::new(OBSERVED_SAMPLES);
                    let r = arms::run_float(&s, design, prepared, &mut obs, &mut |_, _, _| {})
                        .map_err(|e| BitsError::Run(format!("float arm, seed {seed}: {e}")))?;
                    Ok((seed, r.test_accuracy, obs.ranges))
                })
                .collect()
        });
        let mut ranges = Ranges::default();
        for r in results {
            let (seed, acc, rg) = r?;
            self.float.insert(seed, acc);
            self.float_runs += 1;
            ranges = ranges.max(rg);
        }
        Ok(ranges)
    }

    /// The float arm's final accuracy of `seed` (after [`Runner::floats`]).
    pub fn float_accuracy(&self, seed: u64) -> Option<f64> {
        self.float.get(&seed).copied()
    }

    /// Makes sure every `(point, seed)` has been run, running the missing ones in parallel.
    pub fn ensure(&mut self, wanted: &[(Point, u64)], purpose: Purpose) -> Result<(), BitsError> {
        let mut missing: Vec<(Point, u64)> = Vec::new();
        for &k in wanted {
            if !self.cache.contains_key(&k) && !missing.contains(&k) {
                missing.push(k);
            }
        }
        let (spec, design, prepared) = (self.spec, self.design, self.prepared);
        let results: Vec<Result<Keyed, BitsError>> = self.pool.install(|| {
            missing
                .par_iter()
                .map(|&(p, seed)| {
                    let s = Self::spec_for(spec, seed);
                    let d = p.apply(design);
                    let r = arms::run_fixed(&s, &d, prepared, &mut NoObserver, &mut |_, _, _| {})
                        .map_err(|e| {
                        BitsError::Run(format!("fixed arm {p}, seed {seed}: {e}"))
                    })?;
                    Ok((
                        (p, seed),
                        Outcome {
                            fixed_accuracy: r.test_accuracy,
                            saturations: r.saturations,
                            lost_updates: r.lost_updates,
                            updates: r.updates,
                        },
                    ))
                })
                .collect()
        });
        for r in results {
            let (k, o) = r?;
            self.cache.insert(k, o);
            self.log.push((k.0, k.1, o, purpose));
            match purpose {
                Purpose::Search => self.search_runs += 1,
                Purpose::Scan => self.scan_runs += 1,
            }
        }
        Ok(())
    }

    /// A cached outcome.
    pub fn outcome(&self, p: Point, seed: u64) -> Option<Outcome> {
        self.cache.get(&(p, seed)).copied()
    }

    /// The accuracy gap of `p` over `seeds` (running what is missing).
    pub fn gap(
        &mut self,
        p: Point,
        seeds: &[u64],
        purpose: Purpose,
    ) -> Result<GapStats, BitsError> {
        let wanted: Vec<(Point, u64)> = seeds.iter().map(|&s| (p, s)).collect();
        self.ensure(&wanted, purpose)?;
        self.cached_gap(p, seeds)
            .ok_or_else(|| BitsError::Run(format!("no result for {p}")))
    }

    /// The gap of `p` over `seeds` if every run is cached.
    pub fn cached_gap(&self, p: Point, seeds: &[u64]) -> Option<GapStats> {
        let mut gaps = Vec::with_capacity(seeds.len());
        let mut fixed = Vec::with_capacity(seeds.len());
        let (mut sat, mut lost, mut updates) = (0u64, 0u64, 0u64);
        for &s in seeds {
            let o = self.outcome(p, s)?;
            let f = self.float_accuracy(s)?;
            gaps.push(100.0 * (f - o.fixed_accuracy));
            fixed.push(100.0 * o.fixed_accuracy);
            sat = sat.saturating_add(o.saturations);
            lost = lost.saturating_add(o.lost_updates);
            updates = updates.saturating_add(o.updates);
        }
        let mut g = GapStats::of(&gaps, &fixed);
        let u = updates.max(1) as f64;
        g.saturations_per_update = sat as f64 / u;
        g.lost_share = lost as f64 / u;
        Some(g)
    }
}
