//! Initial states of an ensemble: one fixed wavefunction, a Gaussian packet
//! whose parameters are drawn per realization, or a list used in turn.

use num_complex::Complex64;

use crate::disorder::Line;
use crate::error::{invalid, CoreError};
use crate::random::{Stream, PACKET_PURPOSE};

/// How one packet parameter is chosen per realization.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Draw {
    Fixed(f64),
    /// Uniform on `[low, high)`.
    Uniform(f64, f64),
    /// Normal with mean and standard deviation.
    Normal(f64, f64),
}

impl Draw {
    pub(crate) fn sample(&self, stream: &mut Stream) -> f64 {
        match *self {
            Draw::Fixed(value) => value,
            Draw::Uniform(low, high) => low + (high - low) * stream.uniform(),
            Draw::Normal(mean, std) => mean + std * stream.normal(),
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub enum PacketSource {
    Fixed(Vec<Complex64>),
    /// Gaussian packet (centre, wavenumber, rms width of |psi|^2), drawn in that order.
    Gaussian {
        center: Draw,
        wavenumber: Draw,
        width: Draw,
    },
    /// Realization `r` starts from entry `r % len`.
    List(Vec<Vec<Complex64>>),
}

impl PacketSource {
    pub fn validate(&self, points: usize) -> Result<(), CoreError> {
        let check = |psi: &Vec<Complex64>| {
            if psi.len() != points {
                return invalid(format!(
                    "packet has {} values; the grid has {points}",
                    psi.len()
                ));
            }
            if psi.iter().any(|z| !(z.re.is_finite() && z.im.is_finite())) {
                return invalid("packet must be finite everywhere");
            }
            Ok(())
        };
        match self {
            PacketSource::Fixed(psi) => check(psi),
            PacketSource::List(list) if list.is_empty() => invalid("packet list is empty"),
            PacketSource::List(list) => list.iter().try_for_each(check),
            PacketSource::Gaussian { .. } => Ok(()),
        }
    }

    /// The drawn (centre, wavenumber, width) of realization `index`.
    pub fn parameters(&self, seed: u64, index: u64) -> Option<(f64, f64, f64)> {
        match self {
            PacketSource::Gaussian {
                center,
                wavenumber,
                width,
            } => {
                let mut stream = Stream::new(seed, PACKET_PURPOSE, index);
                let c = center.sample(&mut stream);
                let k = wavenumber.sample(&mut stream);
                let s = width.sample(&mut stream);
                Some((c, k, s))
            }
            _ => None,
        }
    }

    /// Write the initial state of realization `index` into `psi`.
    pub fn fill(
        &self,
        line: Line,
        seed: u64,
        index: u64,
        psi: &mut [Complex64],
    ) -> Result<(), CoreError> {
        match self {
            PacketSource::Fixed(values) => psi.copy_from_slice(values),
            PacketSource::List(list) => psi.copy_from_slice(&list[index as usize % list.len()]),
            PacketSource::Gaussian { .. } => {
                let (center, wavenumber, width) =
                    self.parameters(seed, index).expect("a Gaussian source");
                if !(width.is_finite()
                    && width > 0.0
                    && center.is_finite()
                    && wavenumber.is_finite())
                {
                    return invalid(format!(
                        "realization {index} drew an impossible packet: center {center}, wavenumber {wavenumber}, width {width}"
                    ));
                }
                gaussian(line, center, wavenumber, width, psi);
            }
        }
        Ok(())
    }
}

/// The minimum-uncertainty packet `exp(-(x-c)^2/(4 s^2) + i k (x-c))` with `x - c`
/// taken to the nearest periodic image, normalized so that `sum |psi|^2 dx = 1`
/// (the same rule as `mottle.GaussianPacket.values`).
pub fn gaussian(line: Line, center: f64, wavenumber: f64, width: f64, psi: &mut [Complex64]) {
    let length = line.points as f64 * line.dx;
    let mut norm = 0.0;
    for (j, z) in psi.iter_mut().enumerate() {
        let mut offset = line.start + j as f64 * line.dx - center;
        offset -= length * (offset / length).round_ties_even();
        *z = Complex64::from_polar(
            (-offset * offset / (4.0 * width * width)).exp(),
            wavenumber * offset,
        );
        norm += z.norm_sqr();
    }
    let scale = 1.0 / (norm * line.dx).sqrt();
    psi.iter_mut().for_each(|z| *z *= scale);
}
