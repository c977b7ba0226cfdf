//! The demo's topographic shading: a smooth seeded field over the sphere.

use rand::Rng;
use rand_chacha::ChaCha8Rng;

/// A smooth field in [0, 1] over the sphere: bilinear value noise on 5° cells.
pub(super) struct Shading {
    grid: Vec<f64>,
}

impl Shading {
    const NLON: usize = 72;
    const NLAT: usize = 37;

    pub(super) fn new(rng: &mut ChaCha8Rng) -> Shading {
        Shading {
            grid: (0..Self::NLON * Self::NLAT).map(|_| rng.gen()).collect(),
        }
    }

    pub(super) fn at(&self, lat: f64, lon: f64) -> f64 {
        let x = (lon.rem_euclid(360.0)) / 5.0;
        let y = (lat + 90.0) / 5.0;
        let (x0, y0) = (
            x.floor() as usize % Self::NLON,
            (y.floor() as usize).min(Self::NLAT - 2),
        );
        let (fx, fy) = (x - x.floor(), y - y0 as f64);
        let x1 = (x0 + 1) % Self::NLON;
        let g = |i: usize, j: usize| self.grid[j * Self::NLON + i];
        let a = g(x0, y0) * (1.0 - fx) + g(x1, y0) * fx;
        let b = g(x0, y0 + 1) * (1.0 - fx) + g(x1, y0 + 1) * fx;
        a * (1.0 - fy) + b * fy
    }
}
