//! Operator splittings of `exp(-i (T + V) h / hbar)` into kinetic and potential factors.
//!
//! A splitting with `m` kinetic stages is `V(a_0 h) K(b_0 h) V(a_1 h) ... K(b_{m-1} h) V(a_m h)`,
//! with `sum a = sum b = 1`. Consecutive steps merge `V(a_m h) V(a_0 h)` into one
//! factor, so Strang costs one kinetic and one potential factor per step.

use crate::error::{invalid, CoreError};

/// Coefficients of a symmetric splitting.
#[derive(Debug, Clone, PartialEq)]
pub struct Splitting {
    /// Fractions of the step for the potential factors (`m + 1` of them).
    pub potential: Vec<f64>,
    /// Fractions of the step for the kinetic factors (`m` of them).
    pub kinetic: Vec<f64>,
    /// The global order of accuracy.
    pub order: u32,
}

impl Splitting {
    /// Strang, SIAM J. Numer. Anal. 5, 506 (1968): `V(h/2) K(h) V(h/2)`, order 2.
    pub fn strang() -> Self {
        Splitting {
            potential: vec![0.5, 0.5],
            kinetic: vec![1.0],
            order: 2,
        }
    }

    /// Yoshida's triple jump, Phys. Lett. A 150, 262 (1990): Strang steps of
    /// `w1 h, w0 h, w1 h` with `w1 = 1/(2 - 2^(1/3))`, `w0 = -2^(1/3)/(2 - 2^(1/3))`; order 4.
    pub fn yoshida() -> Self {
        let cube_root = 2f64.powf(1.0 / 3.0);
        let w1 = 1.0 / (2.0 - cube_root);
        let w0 = -cube_root / (2.0 - cube_root);
        Splitting {
            potential: vec![w1 / 2.0, (w1 + w0) / 2.0, (w0 + w1) / 2.0, w1 / 2.0],
            kinetic: vec![w1, w0, w1],
            order: 4,
        }
    }

    /// The optimized 6-stage symmetric method S6 of Blanes & Moan,
    /// J. Comput. Appl. Math. 142, 313 (2002), order 4, with the potential as
    /// the outer (7-factor) operator. Coefficients from memory of the paper's
    /// table; the measured order (4) and error constant are checked in the tests.
    pub fn blanes_moan() -> Self {
        let a1 = 0.079_203_696_431_195_7;
        let a2 = 0.353_172_906_049_774;
        let a3 = -0.042_065_080_357_719_5;
        let a4 = 1.0 - 2.0 * (a1 + a2 + a3);
        let b1 = 0.209_515_106_613_362;
        let b2 = -0.143_851_773_179_818;
        let b3 = 0.5 - (b1 + b2);
        Splitting {
            potential: vec![a1, a2, a3, a4, a3, a2, a1],
            kinetic: vec![b1, b2, b3, b3, b2, b1],
            order: 4,
        }
    }

    /// The splitting by name: `strang`, `yoshida` or `blanes-moan`.
    pub fn named(name: &str) -> Result<Self, CoreError> {
        match name {
            "strang" => Ok(Self::strang()),
            "yoshida" => Ok(Self::yoshida()),
            "blanes-moan" => Ok(Self::blanes_moan()),
            other => invalid(format!(
                "splitting {other:?} is not known: use \"strang\", \"yoshida\" or \"blanes-moan\""
            )),
        }
    }

    pub fn stages(&self) -> usize {
        self.kinetic.len()
    }
}

/// Which precomputed factor each position of the step loop uses, with equal
/// fractions sharing one table.
#[derive(Debug, Clone)]
pub struct Schedule {
    /// Distinct potential factors as (phase fraction, absorption fraction) of
    /// the step; the tables are built for these. The absorbing layers act only
    /// in factors of positive fraction, rescaled so that they absorb for exactly
    /// one step per step: a negative fraction (Yoshida, Blanes-Moan) would make
    /// `exp(+W|t|)` amplify the wave in the layers.
    pub potential_fractions: Vec<(f64, f64)>,
    /// Distinct kinetic fractions.
    pub kinetic_fractions: Vec<f64>,
    /// Potential factor before kinetic stage `i` (index 0: after a pause, i.e. `a_0`).
    pub before_stage: Vec<usize>,
    /// Potential factor before stage 0 when the previous step is merged in (`a_m + a_0`).
    pub merged: usize,
    /// Potential factor that closes a step before a pause (`a_m`).
    pub closing: usize,
    /// Kinetic factor of stage `i`.
    pub kinetic_stage: Vec<usize>,
}

fn intern<V: Copy + PartialEq>(values: &mut Vec<V>, value: V) -> usize {
    match values.iter().position(|&known| known == value) {
        Some(index) => index,
        None => {
            values.push(value);
            values.len() - 1
        }
    }
}

impl Schedule {
    pub fn new(splitting: &Splitting) -> Self {
        let m = splitting.stages();
        let mut potential_fractions = Vec::new();
        let mut kinetic_fractions = Vec::new();
        let a = &splitting.potential;
        let positive_total: f64 = a[..m].iter().map(|&f| f.max(0.0)).sum::<f64>() + a[m].max(0.0);
        let absorbing = |f: f64| f.max(0.0) / positive_total;
        let before_stage = (0..m)
            .map(|i| intern(&mut potential_fractions, (a[i], absorbing(a[i]))))
            .collect();
        let merged_pair = (a[m] + a[0], absorbing(a[m]) + absorbing(a[0]));
        let merged = intern(&mut potential_fractions, merged_pair);
        let closing = intern(&mut potential_fractions, (a[m], absorbing(a[m])));
        let kinetic_stage = splitting
            .kinetic
            .iter()
            .map(|&b| intern(&mut kinetic_fractions, b))
            .collect();
        Schedule {
            potential_fractions,
            kinetic_fractions,
            before_stage,
            merged,
            closing,
            kinetic_stage,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coefficients_sum_to_one() {
        for splitting in [
            Splitting::strang(),
            Splitting::yoshida(),
            Splitting::blanes_moan(),
        ] {
            let a: f64 = splitting.potential.iter().sum();
            let b: f64 = splitting.kinetic.iter().sum();
            assert!((a - 1.0).abs() < 1e-14, "{splitting:?}");
            assert!((b - 1.0).abs() < 1e-14, "{splitting:?}");
            assert_eq!(splitting.potential.len(), splitting.kinetic.len() + 1);
        }
    }

    #[test]
    fn strang_schedule_merges_half_steps() {
        let schedule = Schedule::new(&Splitting::strang());
        assert_eq!(schedule.potential_fractions, vec![(0.5, 0.5), (1.0, 1.0)]);
        assert_eq!(schedule.before_stage, vec![0]);
        assert_eq!(schedule.merged, 1);
        assert_eq!(schedule.closing, 0);
    }

    #[test]
    fn unknown_splitting_is_refused() {
        assert!(matches!(
            Splitting::named("leapfrog"),
            Err(CoreError::InvalidInput(_))
        ));
    }
}

#[cfg(test)]
mod absorption_tests {
    use super::*;

    #[test]
    fn absorption_fractions_are_positive_and_sum_to_one_step() {
        for splitting in [Splitting::yoshida(), Splitting::blanes_moan()] {
            let schedule = Schedule::new(&splitting);
            let per_step: f64 = schedule.before_stage[1..]
                .iter()
                .chain(std::iter::once(&schedule.merged))
                .map(|&i| schedule.potential_fractions[i].1)
                .sum();
            assert!((per_step - 1.0).abs() < 1e-14, "{per_step}");
            assert!(schedule
                .potential_fractions
                .iter()
                .all(|&(_, absorbing)| absorbing >= 0.0));
        }
    }
}
