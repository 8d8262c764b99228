//! One-dimensional rate-independent plasticity with Voce isotropic hardening, integrated
//! by the backward-Euler return mapping with its consistent (algorithmic) tangent.
//!
//! # Formula
//! ```text
//!   σ = E (ε − εp)                               elasticity
//!   f(σ, α) = |σ| − σy(α) ≤ 0                    yield condition (von Mises in 1D)
//!   σy(α) = σ0 + Q (1 − exp(−b α))               Voce hardening, α = ε̄p
//!   ε̇p = γ̇ sign(σ),  α̇ = γ̇,  γ̇ ≥ 0, γ̇ f = 0     associative flow, Kuhn–Tucker
//! ```
//! Return mapping over a step, from the converged state (εp_n, α_n) and the new total
//! strain ε: trial stress σtr = E (ε − εp_n), ftr = |σtr| − σy(α_n). If ftr ≤ 0 the step
//! is elastic. Otherwise Δγ > 0 solves
//! ```text
//!   g(Δγ) = ftr − E Δγ − [σy(α_n + Δγ) − σy(α_n)] = 0
//! ```
//! by a local Newton iteration (g' = −E − H, H = dσy/dα = Q b exp(−b α)), and
//! σ = σtr − E Δγ sign(σtr), εp = εp_n + Δγ sign(σtr), α = α_n + Δγ. The consistent
//! tangent is dσ/dε = E H / (E + H) with H at α_{n+1} on a plastic step, E otherwise.
//!
//! Because σy is concave in α, g is convex and decreasing, so Newton from Δγ = 0 climbs
//! monotonically to the root and cannot overshoot.
//!
//! # References
//! - E. Voce (1948), The relationship between stress and strain for homogeneous
//!   deformation, *Journal of the Institute of Metals* 74, 537–562 (volume and pages
//!   from memory).
//! - J. C. Simo & T. J. R. Hughes (1998), *Computational Inelasticity*, Springer,
//!   ch. 1 (one-dimensional rate-independent plasticity: return mapping and the
//!   algorithmic tangent modulus) and ch. 2 (the same for J2 flow); chapters quoted
//!   from memory. Section and box numbers are not cited because they would be quoted
//!   from memory too.

/// Voce hardening law and Young's modulus, in MPa.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Voce {
    /// Young's modulus, MPa.
    pub e: f64,
    /// Initial yield stress σ0, MPa.
    pub sigma0: f64,
    /// Saturation increment Q, MPa.
    pub q: f64,
    /// Rate b, dimensionless.
    pub b: f64,
}

/// Converged internal variables of one material point.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct State {
    /// Plastic strain εp.
    pub eps_p: f64,
    /// Equivalent (accumulated) plastic strain α = ε̄p.
    pub alpha: f64,
}

/// Result of one return mapping.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Update {
    /// Stress, MPa.
    pub stress: f64,
    /// Consistent tangent dσ/dε, MPa.
    pub tangent: f64,
    /// Internal variables at the end of the step.
    pub state: State,
    /// Whether the step was plastic.
    pub plastic: bool,
}

/// Relative tolerance of the local Newton iteration on g(Δγ), scaled by σy(α_n): far
/// below the global tolerance, so the local error does not spoil global quadratic
/// convergence, and still above round-off in g (about 1e-16 · E · |ε|).
pub const LOCAL_RTOL: f64 = 1e-13;
/// Cap on local Newton iterations. From Δγ = 0 the convergence is monotone and
/// quadratic; more than a few dozen iterations only happen with non-finite inputs.
pub const MAX_LOCAL_ITERATIONS: usize = 60;

/// The local Newton iteration did not converge (only with non-finite or absurd inputs).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LocalFailure {
    pub strain: f64,
    pub residual: f64,
}

impl Voce {
    /// σy(α) = σ0 + Q (1 − exp(−b α)), MPa (Voce 1948).
    pub fn yield_stress(&self, alpha: f64) -> f64 {
        // −expm1(−x) = 1 − exp(−x) without cancellation for small x.
        self.sigma0 + self.q * -(-self.b * alpha).exp_m1()
    }

    /// H(α) = dσy/dα = Q b exp(−b α), MPa.
    pub fn hardening_modulus(&self, alpha: f64) -> f64 {
        self.q * self.b * (-self.b * alpha).exp()
    }

    /// Backward-Euler return mapping from `old` to total strain `eps`.
    ///
    /// # Errors
    /// [`LocalFailure`] if the local Newton iteration does not reach [`LOCAL_RTOL`] in
    /// [`MAX_LOCAL_ITERATIONS`] (non-finite strain).
    pub fn return_map(&self, eps: f64, old: State) -> Result<Update, LocalFailure> {
        let sigma_tr = self.e * (eps - old.eps_p);
        let sy_n = self.yield_stress(old.alpha);
        let f_tr = sigma_tr.abs() - sy_n;
        if f_tr <= 0.0 {
            return Ok(Update {
                stress: sigma_tr,
                tangent: self.e,
                state: old,
                plastic: false,
            });
        }
        let tol = LOCAL_RTOL * sy_n;
        let mut dg = 0.0_f64;
        let mut converged = false;
        let mut g = f_tr;
        for _ in 0..MAX_LOCAL_ITERATIONS {
            let alpha = old.alpha + dg;
            g = f_tr - self.e * dg - (self.yield_stress(alpha) - sy_n);
            if g.abs() <= tol {
                converged = true;
                break;
            }
            let dg_slope = -self.e - self.hardening_modulus(alpha);
            dg -= g / dg_slope;
        }
        if !converged || !dg.is_finite() {
            return Err(LocalFailure {
                strain: eps,
                residual: g,
            });
        }
        let sign = sigma_tr.signum();
        let alpha = old.alpha + dg;
        let h = self.hardening_modulus(alpha);
        Ok(Update {
            stress: sigma_tr - self.e * dg * sign,
            tangent: self.e * h / (self.e + h),
            state: State {
                eps_p: old.eps_p + dg * sign,
                alpha,
            },
            plastic: true,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const AL: Voce = Voce {
        e: 70_000.0,
        sigma0: 270.0,
        q: 60.0,
        b: 15.0,
    };

    /// Stress relative tolerance: a few hundred ulps of the stress, well above the local
    /// Newton tolerance LOCAL_RTOL = 1e-13.
    const STRESS_RTOL: f64 = 1e-11;

    #[test]
    fn elastic_below_yield_and_unloading() {
        let u = AL.return_map(0.003, State::default()).unwrap();
        assert!(!u.plastic);
        assert_eq!(u.stress, 70_000.0 * 0.003);
        assert_eq!(u.tangent, 70_000.0);
        // Load plastically, then unload a little: elastic with the plastic strain kept.
        let p = AL.return_map(0.02, State::default()).unwrap();
        assert!(p.plastic);
        let back = AL.return_map(0.0195, p.state).unwrap();
        assert!(!back.plastic);
        assert!((back.stress - (p.stress - 70_000.0 * 0.0005)).abs() < 1e-9);
    }

    #[test]
    fn one_big_plastic_step_lands_on_the_voce_curve() {
        // Monotonic loading: σ = σy(α) with α = ε − σ/E, whatever the step size.
        for &eps in &[0.004, 0.01, 0.05, 0.2, 1.0] {
            let u = AL.return_map(eps, State::default()).unwrap();
            let alpha = eps - u.stress / AL.e;
            assert!((u.state.alpha - alpha).abs() < 1e-15);
            let sy = AL.yield_stress(alpha);
            assert!(
                (u.stress - sy).abs() <= STRESS_RTOL * sy,
                "eps {eps}: {} vs {sy}",
                u.stress
            );
        }
    }

    #[test]
    fn compression_is_symmetric() {
        let t = AL.return_map(0.03, State::default()).unwrap();
        let c = AL.return_map(-0.03, State::default()).unwrap();
        assert_eq!(t.stress, -c.stress);
        assert_eq!(t.tangent, c.tangent);
        assert_eq!(t.state.alpha, c.state.alpha);
    }

    #[test]
    fn consistent_tangent_matches_a_finite_difference() {
        // dσ/dε of the algorithm itself, by central differences around a plastic state.
        let old = AL.return_map(0.01, State::default()).unwrap().state;
        let eps = 0.015;
        let h = 1e-7;
        let up = AL.return_map(eps + h, old).unwrap().stress;
        let dn = AL.return_map(eps - h, old).unwrap().stress;
        let fd = (up - dn) / (2.0 * h);
        let tangent = AL.return_map(eps, old).unwrap().tangent;
        // Central-difference truncation O(h²) plus round-off ~1e-16·σ/h ≈ 3e-7 MPa.
        assert!(
            (fd - tangent).abs() < 1e-5 * tangent,
            "fd {fd} vs tangent {tangent}"
        );
    }

    #[test]
    fn non_finite_strain_is_a_local_failure() {
        assert!(AL.return_map(f64::NAN, State::default()).is_err());
        assert!(AL.return_map(f64::INFINITY, State::default()).is_err());
    }
}
