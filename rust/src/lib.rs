//! mottle's core: many-run split-step Fourier propagation of the
//! time-dependent Schrodinger equation, in plain Rust (no Python here but in
//! `bindings`, built with the `python` feature).

pub mod classical;
pub mod classical_ensemble;
pub mod disorder;
pub mod dispersion;
pub mod drive;
pub mod ensemble;
pub mod error;
pub mod ground;
pub mod kernels;
pub mod localization;
pub mod ndfft;
pub mod observables;
pub mod packets;
pub mod propagate;
pub mod random;
pub mod real;
pub mod spectrum;
pub mod splitting;
pub mod stepper;
pub mod transfer;

#[cfg(feature = "python")]
mod bindings;

pub use error::CoreError;
