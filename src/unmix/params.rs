//! Unmixing parameters behind one checked gate: built from flags or a recipe, validated
//! once, with one error per broken rule.

/// The constraint set of the least-squares problem min ‖y − E a‖².
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Solver {
    /// No constraints: a = G⁻¹ Eᵀy.
    Unconstrained,
    /// Σ a = 1 only (abundances may be negative).
    SumToOne,
    /// a ≥ 0 only (Lawson & Hanson 1974).
    Nnls,
    /// a ≥ 0 and Σ a = 1 (Heinz & Chang 2001). The default.
    Fcls,
}

impl Solver {
    pub fn name(self) -> &'static str {
        match self {
            Solver::Unconstrained => "unconstrained",
            Solver::SumToOne => "sum-to-one",
            Solver::Nnls => "nnls",
            Solver::Fcls => "fcls",
        }
    }

    pub fn parse(s: &str) -> Option<Solver> {
        [
            Solver::Unconstrained,
            Solver::SumToOne,
            Solver::Nnls,
            Solver::Fcls,
        ]
        .into_iter()
        .find(|x| x.name() == s)
    }

    pub fn sum_to_one(self) -> bool {
        matches!(self, Solver::SumToOne | Solver::Fcls)
    }

    pub fn non_negative(self) -> bool {
        matches!(self, Solver::Nnls | Solver::Fcls)
    }
}

/// Per-pixel member subsets (multiple-endmember unmixing).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Subsets {
    /// Off when the band set can separate the whole library, else subsets of up to
    /// [`AUTO_SUBSET_SIZE`] members.
    Auto,
    Off,
    /// Subsets of up to K members (plus shade).
    UpTo(usize),
}

/// The subset size `auto` falls back to.
pub const AUTO_SUBSET_SIZE: usize = 3;

impl Subsets {
    pub fn parse(s: &str) -> Result<Subsets, String> {
        match s {
            "auto" => Ok(Subsets::Auto),
            "off" => Ok(Subsets::Off),
            k => k
                .parse::<usize>()
                .ok()
                .filter(|k| *k >= 1)
                .map(Subsets::UpTo)
                .ok_or_else(|| format!("`{s}`: expected auto, off or a subset size K ≥ 1")),
        }
    }

    pub fn name(self) -> String {
        match self {
            Subsets::Auto => "auto".into(),
            Subsets::Off => "off".into(),
            Subsets::UpTo(k) => k.to_string(),
        }
    }
}

/// The arithmetic the solver runs in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Precision {
    /// Single precision: the fast path (within 1e-4 of f64 on the reference problems).
    #[default]
    F32,
    /// Double precision: the reference.
    F64,
}

impl Precision {
    pub fn name(self) -> &'static str {
        match self {
            Precision::F32 => "f32",
            Precision::F64 => "f64",
        }
    }

    pub fn parse(s: &str) -> Option<Precision> {
        [Precision::F32, Precision::F64]
            .into_iter()
            .find(|p| p.name() == s)
    }
}

/// The condition number above which the full problem is refused (2-norm, E with a row of
/// ones): beyond it noise of 10⁻⁴ in reflectance moves abundances by order one.
pub const MAX_CONDITION: f64 = 1e4;

/// Everything that decides how pixels are unmixed.
#[derive(Debug, Clone, PartialEq)]
pub struct UnmixParams {
    pub solver: Solver,
    /// Add a photometric shade member (zero reflectance; Adams, Smith & Johnson 1986).
    pub shade: bool,
    pub subsets: Subsets,
    /// Unmix members the band set cannot separate as one group.
    pub groups: bool,
    /// The grouping angle, degrees.
    pub group_angle_deg: f64,
    /// The noise standard deviation (reflectance) for standard errors; `None` estimates it
    /// from each pixel's residual.
    pub noise: Option<f64>,
    /// Proceed past the identifiability guard.
    pub force: bool,
}

impl Default for UnmixParams {
    fn default() -> Self {
        UnmixParams {
            solver: Solver::Fcls,
            shade: true,
            subsets: Subsets::Auto,
            groups: true,
            group_angle_deg: crate::library::diagnostics::DEFAULT_GROUP_ANGLE_DEG,
            noise: None,
            force: false,
        }
    }
}

/// A broken rule of the parameters.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ParamError {
    #[error("noise {0}: the noise level must be greater than 0")]
    Noise(f64),
    #[error("group angle {0}: must be a non-negative angle in degrees")]
    GroupAngle(f64),
    #[error("subset size {0}: subset mode needs the fcls solver (it compares constrained fits)")]
    SubsetSolver(usize),
}

impl UnmixParams {
    pub fn check(&self) -> Result<(), ParamError> {
        if let Some(n) = self.noise {
            if !(n.is_finite() && n > 0.0) {
                return Err(ParamError::Noise(n));
            }
        }
        if !(self.group_angle_deg.is_finite() && self.group_angle_deg >= 0.0) {
            return Err(ParamError::GroupAngle(self.group_angle_deg));
        }
        if let Subsets::UpTo(k) = self.subsets {
            if self.solver != Solver::Fcls {
                return Err(ParamError::SubsetSolver(k));
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_rule_has_its_error() {
        let ok = UnmixParams::default();
        assert!(ok.check().is_ok());
        let e = UnmixParams {
            noise: Some(0.0),
            ..ok.clone()
        }
        .check();
        assert_eq!(e, Err(ParamError::Noise(0.0)));
        let e = UnmixParams {
            group_angle_deg: -1.0,
            ..ok.clone()
        }
        .check();
        assert_eq!(e, Err(ParamError::GroupAngle(-1.0)));
        let e = UnmixParams {
            subsets: Subsets::UpTo(2),
            solver: Solver::Nnls,
            ..ok
        }
        .check();
        assert_eq!(e, Err(ParamError::SubsetSolver(2)));
    }

    #[test]
    fn subset_settings_parse() {
        assert_eq!(Subsets::parse("auto"), Ok(Subsets::Auto));
        assert_eq!(Subsets::parse("3"), Ok(Subsets::UpTo(3)));
        assert!(Subsets::parse("0").is_err());
    }
}
