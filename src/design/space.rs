//! From the unit box to parameter values and back: linearly over the range
//! (`space: range`) or through the prior's quantile function truncated to the range
//! (`space: prior`).

use crate::study::{DesignSpace, Parameter, Prior};
use statrs::distribution::{Continuous, ContinuousCDF, Normal};

/// The truncated normal of a prior, on the scale where it is normal (ln x for a
/// lognormal prior): location, scale and the cdf at both ends of the range.
struct Truncated {
    normal: Normal,
    log: bool,
    lo: f64,
    hi: f64,
    cdf_lo: f64,
    cdf_hi: f64,
}

impl Truncated {
    fn of(p: &Parameter) -> Option<Self> {
        let (mean, sd, log) = match p.prior {
            Prior::Uniform => return None,
            Prior::Normal { mean, sd } => (mean, sd, false),
            Prior::LogNormal { mu, sigma } => (mu, sigma, true),
        };
        let normal = Normal::new(mean, sd).ok()?;
        let (lo, hi) = if log {
            (p.lo.ln(), p.hi.ln())
        } else {
            (p.lo, p.hi)
        };
        let (cdf_lo, cdf_hi) = (normal.cdf(lo), normal.cdf(hi));
        // A range so far in a tail that the prior puts no representable mass in it: the
        // prior is flat there for all practical purposes.
        if cdf_hi.partial_cmp(&cdf_lo) != Some(std::cmp::Ordering::Greater) {
            return None;
        }
        Some(Self {
            normal,
            log,
            lo,
            hi,
            cdf_lo,
            cdf_hi,
        })
    }

    fn quantile(&self, u: f64) -> f64 {
        let q = self.cdf_lo + u * (self.cdf_hi - self.cdf_lo);
        let mut z = self.normal.inverse_cdf(q);
        // statrs' inverse is good to about 1e-10 in probability; one Newton step on
        // F(z) = q brings the round trip through `cdf` to rounding level.
        let density = self.normal.pdf(z);
        if density > 0.0 && z.is_finite() {
            z -= (self.normal.cdf(z) - q) / density;
        }
        let z = z.clamp(self.lo, self.hi);
        if self.log {
            z.exp()
        } else {
            z
        }
    }

    fn cdf(&self, x: f64) -> f64 {
        let z = if self.log { x.ln() } else { x };
        (self.normal.cdf(z) - self.cdf_lo) / (self.cdf_hi - self.cdf_lo)
    }
}

/// The value of parameter `p` at unit coordinate `u` ∈ [0, 1].
///
/// # Formula
/// `range`: x = lo + u (hi − lo). `prior` (normal or lognormal, truncated to
/// [lo, hi]): x = F⁻¹(F(lo) + u (F(hi) − F(lo))), F the prior's cdf; a uniform prior
/// is linear as with `range`. The result is clamped to [lo, hi] against rounding.
pub fn from_unit(p: &Parameter, space: DesignSpace, u: f64) -> f64 {
    let linear = || (p.lo + (p.hi - p.lo) * u).clamp(p.lo, p.hi);
    match space {
        DesignSpace::Range => linear(),
        DesignSpace::Prior => match Truncated::of(p) {
            Some(t) => t.quantile(u).clamp(p.lo, p.hi),
            None => linear(),
        },
    }
}

/// The unit coordinate of value `x` of parameter `p`: the inverse of [`from_unit`].
pub fn to_unit(p: &Parameter, space: DesignSpace, x: f64) -> f64 {
    let linear = || (x - p.lo) / (p.hi - p.lo);
    match space {
        DesignSpace::Range => linear(),
        DesignSpace::Prior => match Truncated::of(p) {
            Some(t) => t.cdf(x),
            None => linear(),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn param(prior: Prior, lo: f64, hi: f64) -> Parameter {
        Parameter {
            name: "x".into(),
            unit: None,
            lo,
            hi,
            prior,
        }
    }

    /// Quantile then cdf through statrs' erf: a few ulps of the unit coordinate.
    const ROUND_TRIP: f64 = 1e-12;

    #[test]
    fn prior_space_round_trips_and_keeps_the_ends() {
        let cases = [
            param(Prior::Uniform, 2.0, 5.0),
            param(
                Prior::Normal {
                    mean: 200.0,
                    sd: 10.0,
                },
                150.0,
                250.0,
            ),
            param(
                Prior::LogNormal {
                    mu: 0.0,
                    sigma: 0.5,
                },
                0.2,
                5.0,
            ),
        ];
        for p in &cases {
            assert!((from_unit(p, DesignSpace::Prior, 0.0) - p.lo).abs() < 1e-9 * p.hi);
            assert!((from_unit(p, DesignSpace::Prior, 1.0) - p.hi).abs() < 1e-9 * p.hi);
            for u in [0.01, 0.3, 0.5, 0.77, 0.999] {
                let x = from_unit(p, DesignSpace::Prior, u);
                assert!(x >= p.lo && x <= p.hi);
                let back = to_unit(p, DesignSpace::Prior, x);
                assert!((back - u).abs() < ROUND_TRIP, "{p:?}: {u} -> {x} -> {back}");
            }
        }
    }

    #[test]
    fn a_normal_prior_puts_the_middle_half_of_the_points_near_the_mean() {
        // N(200, 10) on [150, 250]: the quartiles are 200 ± 0.6745 × 10 (standard
        // normal quartile; the truncation at ±5 sd changes them by < 1e-6).
        let p = param(
            Prior::Normal {
                mean: 200.0,
                sd: 10.0,
            },
            150.0,
            250.0,
        );
        let q1 = from_unit(&p, DesignSpace::Prior, 0.25);
        let q3 = from_unit(&p, DesignSpace::Prior, 0.75);
        assert!((q1 - (200.0 - 6.744_897_5)).abs() < 1e-4, "{q1}");
        assert!((q3 - (200.0 + 6.744_897_5)).abs() < 1e-4, "{q3}");
        // The same unit coordinates over the range: 175 and 225.
        assert_eq!(from_unit(&p, DesignSpace::Range, 0.25), 175.0);
    }
}
