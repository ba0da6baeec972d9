//! The kinetic-energy model as Python describes it, mapped onto the core's one
//! model of it (`crate::dispersion::Dispersion`), which the classical particles
//! and the transfer matrices (`crate::transfer::Medium`) use.

use super::request::tagged;
use crate::dispersion::Dispersion;
use crate::error::CoreError;
use crate::transfer::Medium;

tagged! {
    /// The kinetic-energy model of a system.
    pub(crate) enum ModelRequest("model") {
        "continuum" => Continuum { hbar: f64, mass: f64 },
        "lattice" => Lattice { hbar: f64, hopping: f64 },
    }
}

impl ModelRequest {
    pub(crate) fn hbar(&self) -> f64 {
        match *self {
            ModelRequest::Continuum { hbar, .. } | ModelRequest::Lattice { hbar, .. } => hbar,
        }
    }

    /// The core's dispersion, checked.
    pub(crate) fn dispersion(&self) -> Result<Dispersion, CoreError> {
        let dispersion = match *self {
            ModelRequest::Continuum { hbar, mass } => Dispersion::Continuum { hbar, mass },
            ModelRequest::Lattice { hbar, hopping } => Dispersion::Lattice { hopping, hbar },
        };
        dispersion.validate()?;
        Ok(dispersion)
    }

    /// The wave equation on cells (continuum) or sites (lattice) `dx` apart.
    pub(crate) fn medium(&self, dx: f64) -> Result<Medium, CoreError> {
        let medium = Medium {
            dispersion: self.dispersion()?,
            dx,
        };
        medium.validate()?;
        Ok(medium)
    }

    /// The classical particle's kinetic energy on the same grid (`dx` checked).
    pub(crate) fn kinetic(&self, dx: f64) -> Result<Dispersion, CoreError> {
        Ok(self.medium(dx)?.dispersion)
    }
}
