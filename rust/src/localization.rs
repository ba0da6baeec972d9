//! Transfer matrices over many disorder realizations: Lyapunov exponents and
//! stationary transmissions, rayon over realizations.
//!
//! Realization `r` is the one `Realizer` adds for `(seed, r)`, the same
//! potential the split-step ensembles use. Every realization's values depend
//! on `(seed, r)` alone and are collected in index order, so results are
//! bitwise the same for any thread count.

use std::ops::Range;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use rayon::prelude::*;

use crate::disorder::{Line, Plan, Realizer, Term};
use crate::error::{invalid, CoreError};
use crate::transfer::{log_growth, log_transmission, Medium};

/// The potentials of an ensemble: a deterministic part plus realizations of disorder.
#[derive(Debug, Clone)]
pub struct Sample<'a> {
    pub line: Line,
    pub static_potential: &'a [f64],
    pub disorder: &'a [Term],
    pub seed: u64,
}

impl Sample<'_> {
    /// Check the inputs and make the disorder's plan, before any thread starts.
    fn validate(&self, energies: &[f64]) -> Result<Arc<Plan>, CoreError> {
        if self.static_potential.len() != self.line.points {
            return invalid(format!(
                "static potential has {} values; the grid has {}",
                self.static_potential.len(),
                self.line.points
            ));
        }
        if let Some(bad) = energies.iter().find(|e| !e.is_finite()) {
            return invalid(format!("energies must be finite, got {bad}"));
        }
        Ok(Arc::new(Plan::new(self.line, self.disorder)?))
    }

    /// Run `work(potential, index)` for realizations `first .. first + count`
    /// in parallel; results in index order.
    fn map_realizations<R, F>(
        &self,
        plan: &Arc<Plan>,
        first: usize,
        count: usize,
        cancel: &AtomicBool,
        work: F,
    ) -> Result<Vec<R>, CoreError>
    where
        R: Send,
        F: Fn(&[f64], usize) -> Result<R, CoreError> + Sync,
    {
        (first..first + count)
            .into_par_iter()
            .map_init(
                || (Realizer::with_plan(plan.clone()), vec![0.0; 0]),
                |(realizer, potential), index| {
                    if cancel.load(Ordering::Relaxed) {
                        return Err(CoreError::Interrupted);
                    }
                    potential.clear();
                    potential.extend_from_slice(self.static_potential);
                    realizer.add_to(self.seed, index as u64, potential)?;
                    work(potential, index)
                },
            )
            .collect()
    }
}

/// `ln T` through the points `region` of the potential (its first and last
/// points are the leads) for each realization and energy: `count x energies`,
/// realization-major (see `transfer::log_transmission` for the leads).
pub fn log_transmissions(
    sample: &Sample,
    medium: Medium,
    region: Range<usize>,
    energies: &[f64],
    first: usize,
    count: usize,
    cancel: &AtomicBool,
) -> Result<Vec<f64>, CoreError> {
    medium.validate()?;
    let plan = sample.validate(energies)?;
    if region.len() < 2 || region.end > sample.line.points {
        return invalid(format!(
            "region {region:?} must hold at least two of the grid's {} points (one per lead)",
            sample.line.points
        ));
    }
    let rows = sample.map_realizations(&plan, first, count, cancel, |potential, _| {
        let cells = &potential[region.clone()];
        energies
            .par_iter()
            .map(|&energy| log_transmission(medium, cells, energy, cancel))
            .collect::<Result<Vec<f64>, CoreError>>()
    })?;
    Ok(rows.into_iter().flatten().collect())
}

/// The Lyapunov exponent (per unit length: `ln growth / (cells * dx)`) over
/// the cells `region` for each realization and energy: `count x energies`,
/// realization-major (see `transfer::log_growth` for the start and the norm).
pub fn lyapunov_exponents(
    sample: &Sample,
    medium: Medium,
    region: Range<usize>,
    energies: &[f64],
    first: usize,
    count: usize,
    cancel: &AtomicBool,
) -> Result<Vec<f64>, CoreError> {
    medium.validate()?;
    let plan = sample.validate(energies)?;
    if region.start >= region.end || region.end > sample.line.points {
        return invalid(format!(
            "region {region:?} must be a non-empty range of the grid's {} points",
            sample.line.points
        ));
    }
    let length = region.len() as f64 * medium.dx();
    let rows = sample.map_realizations(&plan, first, count, cancel, |potential, _| {
        let cells = &potential[region.clone()];
        energies
            .par_iter()
            .map(|&energy| Ok(log_growth(medium, cells, energy, cancel)? / length))
            .collect::<Result<Vec<f64>, CoreError>>()
    })?;
    Ok(rows.into_iter().flatten().collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::disorder::Kind;

    fn sample<'a>(statics: &'a [f64], terms: &'a [Term]) -> Sample<'a> {
        Sample {
            line: Line {
                points: statics.len(),
                dx: 1.0,
                start: 0.0,
            },
            static_potential: statics,
            disorder: terms,
            seed: 11,
        }
    }

    #[test]
    fn shared_inputs_cross_threads() {
        fn assert_send_sync<T: Send + Sync>() {}
        assert_send_sync::<Sample<'static>>();
        assert_send_sync::<Medium>();
        assert_send_sync::<crate::classical_ensemble::ClassicalSpec>();
    }

    #[test]
    fn anderson_lyapunov_matches_thouless_at_weak_disorder() {
        // gamma = W^2 / (24 (4 - E^2)) per site (Thouless, Ill-Condensed Matter,
        // Les Houches 1978); re-computed xi(1.5) = 41.2 for W = 1 (docs/validation.md).
        let points = 100_000;
        let statics = vec![0.0; points];
        let terms = [Term {
            kind: Kind::Box { width: 1.0 },
            start: 0.0,
            stop: points as f64,
        }];
        let medium = Medium::lattice(1.0, 1.0);
        let never = AtomicBool::new(false);
        let gammas = lyapunov_exponents(
            &sample(&statics, &terms),
            medium,
            0..points,
            &[1.5],
            0,
            8,
            &never,
        )
        .unwrap();
        let mean = gammas.iter().sum::<f64>() / gammas.len() as f64;
        assert!(
            (1.0 / mean - 41.2).abs() < 0.05 * 41.2,
            "xi = {}",
            1.0 / mean
        );
    }

    #[test]
    fn results_do_not_depend_on_threads() {
        let statics = vec![0.0; 2000];
        let terms = [Term {
            kind: Kind::Box { width: 2.0 },
            start: 100.0,
            stop: 1900.0,
        }];
        let medium = Medium::lattice(1.0, 1.0);
        let never = AtomicBool::new(false);
        let run = |threads| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| {
                    log_transmissions(
                        &sample(&statics, &terms),
                        medium,
                        0..statics.len(),
                        &[0.3, 1.1],
                        32,
                        20,
                        &never,
                    )
                    .unwrap()
                })
        };
        let one = run(1);
        assert_eq!(one, run(3));
        assert_eq!(one.len(), 40);
        // Realizations 32.. of a run from 0 are those of a run from 32.
        let from_zero = rayon::ThreadPoolBuilder::new()
            .num_threads(2)
            .build()
            .unwrap()
            .install(|| {
                log_transmissions(
                    &sample(&statics, &terms),
                    medium,
                    0..statics.len(),
                    &[0.3, 1.1],
                    0,
                    52,
                    &never,
                )
                .unwrap()
            });
        assert_eq!(&from_zero[64..], &one[..]);
    }

    #[test]
    fn bad_regions_and_cancellation_are_errors() {
        let statics = vec![0.0; 100];
        let medium = Medium::lattice(1.0, 1.0);
        let never = AtomicBool::new(false);
        let s = sample(&statics, &[]);
        assert!(lyapunov_exponents(&s, medium, 50..50, &[0.0], 0, 1, &never).is_err());
        assert!(lyapunov_exponents(&s, medium, 0..101, &[0.0], 0, 1, &never).is_err());
        assert!(lyapunov_exponents(&s, medium, 0..10, &[f64::NAN], 0, 1, &never).is_err());
        let cancelled = AtomicBool::new(true);
        assert_eq!(
            lyapunov_exponents(&s, medium, 0..10, &[0.0], 0, 4, &cancelled),
            Err(CoreError::Interrupted)
        );
    }
}
