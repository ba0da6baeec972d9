//! The kinetic-energy model as Python describes it, mapped onto what the
//! stepper's classical particle (`crate::classical::Kinetic`) and the transfer
//! matrices (`crate::transfer::Medium`) use.

use super::request::tagged;
use crate::classical::Kinetic;
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

    /// The wave equation on cells (continuum) or sites (lattice) `dx` apart.
    pub(crate) fn medium(&self, dx: f64) -> Result<Medium, CoreError> {
        let medium = match *self {
            ModelRequest::Continuum { hbar, mass } => Medium::Continuum { hbar, mass, dx },
            ModelRequest::Lattice { hopping, .. } => Medium::Lattice { hopping, dx },
        };
        medium.validate()?;
        Ok(medium)
    }

    /// The classical particle's kinetic energy on the same grid.
    pub(crate) fn kinetic(&self, dx: f64) -> Result<Kinetic, CoreError> {
        self.medium(dx)?;
        Ok(match *self {
            ModelRequest::Continuum { mass, .. } => Kinetic::Continuum { mass },
            ModelRequest::Lattice { hbar, hopping } => Kinetic::Lattice {
                hopping,
                spacing: dx,
                hbar,
            },
        })
    }
}
