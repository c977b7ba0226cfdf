//! Geometry backplanes by name: the angles a cube may carry per pixel (incidence,
//! emission, phase, latitude, longitude, all in degrees), with the names sidecars and FITS
//! extensions use. Ground level: the cube holds the planes, photometry and units read them.

/// A geometry backplane: one angle per pixel, in degrees.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Backplane {
    Incidence,
    Emission,
    Phase,
    Latitude,
    Longitude,
}

impl Backplane {
    pub const ALL: [Backplane; 5] = [
        Backplane::Incidence,
        Backplane::Emission,
        Backplane::Phase,
        Backplane::Latitude,
        Backplane::Longitude,
    ];

    /// Lower-case name, as used in JSON and sidecars.
    pub fn name(self) -> &'static str {
        match self {
            Backplane::Incidence => "incidence",
            Backplane::Emission => "emission",
            Backplane::Phase => "phase",
            Backplane::Latitude => "latitude",
            Backplane::Longitude => "longitude",
        }
    }

    /// The FITS extension name.
    pub fn extname(self) -> &'static str {
        match self {
            Backplane::Incidence => "INCIDENCE",
            Backplane::Emission => "EMISSION",
            Backplane::Phase => "PHASE",
            Backplane::Latitude => "LATITUDE",
            Backplane::Longitude => "LONGITUDE",
        }
    }
}
