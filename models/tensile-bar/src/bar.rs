//! The finite-element model of the bar: mesh, element forces and tangents, and the
//! global Newton–Raphson solution per load increment under displacement control.
//!
//! # Formula
//! Two-node linear elements along the axis, element e of length L_e and constant area
//! A_e between nodes e and e+1. Strain ε_e = (u_{e+1} − u_e) / L_e, axial force
//! N_e = A_e σ(ε_e), tangent stiffness k_e = A_e C_e / L_e with C_e the consistent
//! tangent of the return mapping. Node 0 is held (u_0 = 0); the last node carries the
//! prescribed displacement δ. The free nodes carry no load, so the residual is
//! ```text
//!   R_i = N_{i−1} − N_i ,      i = 1 … n_e − 1
//! ```
//! and the tangent matrix is tridiagonal with K_ii = k_{i−1} + k_i and
//! K_{i,i+1} = −k_i. Each increment starts from a tangent predictor (the last converged
//! tangent, with the new end displacement as a Dirichlet condition) and iterates
//! K Δu = −R until max_i |R_i| ≤ [`RESIDUAL_RTOL`] · σ0 · min A. With the consistent
//! tangent the iteration converges quadratically (Simo & Hughes 1998, ch. 1–2,
//! chapters from memory). The reaction at the loaded end is N of the last element.
//!
//! Newton is only locally convergent: a large first plastic increment can throw an
//! iterate far past the saturation of the Voce curve, where the tangent vanishes.
//! An increment that fails (iteration cap, non-finite residual, singular tangent) is
//! therefore halved and retried from the last converged state, up to `max_cutbacks`
//! times per prescribed displacement. Under monotonic loading this changes nothing in
//! the result: backward Euler lands on σ = σy(α) whatever the increment (see
//! `material.rs`), so the response does not depend on how a step is split.
//!
//! # References
//! - J. C. Simo & T. J. R. Hughes (1998), *Computational Inelasticity*, Springer,
//!   ch. 1–2 (chapters quoted from memory).
//! - T. J. R. Hughes (2000), *The Finite Element Method: Linear Static and Dynamic
//!   Finite Element Analysis*, Dover, ch. 1 (two-node bar elements; chapter quoted
//!   from memory).

use crate::input::Input;
use crate::material::{State, Voce};
use std::fmt;

/// Global convergence tolerance, relative to the yield force σ0 · min A of the
/// narrowest section: 1e-10 of it is far below any force of interest (the example's
/// measurement noise is about 0.5 % of the yield force) and still about a million
/// times above round-off in the element forces.
pub const RESIDUAL_RTOL: f64 = 1e-10;

/// A pivot below this fraction of its diagonal entry means a singular tangent
/// (a section with zero tangent stiffness cut off part of the bar).
const PIVOT_RTOL: f64 = 1e-14;

/// The discretised bar: element lengths (mm) and areas (mm²), and the material.
#[derive(Debug, Clone, PartialEq)]
pub struct Bar {
    pub lengths: Vec<f64>,
    pub areas: Vec<f64>,
    pub material: Voce,
}

impl Bar {
    /// Mesh the specimen of `inp`: a wider end, the gauge section, a wider end.
    ///
    /// # Formula
    /// In the gauge, at distance s from its start, the width is
    /// w(s) = w_g · (1 − τ · (1 − |2 s / L_g − 1|)), so w_g at both gauge ends and
    /// w_g (1 − τ) at mid-gauge; each element takes the width at its midpoint times the
    /// thickness. The wider ends are prismatic. E is converted from GPa to MPa (× 1000)
    /// so that forces come out in N with lengths in mm.
    pub fn from_input(inp: &Input) -> Bar {
        let mut lengths = Vec::new();
        let mut areas = Vec::new();
        let t = inp.thickness_mm;
        let push_grip = |lengths: &mut Vec<f64>, areas: &mut Vec<f64>| {
            if inp.grip_length_mm > 0.0 {
                let h = inp.grip_length_mm / inp.grip_elements as f64;
                for _ in 0..inp.grip_elements {
                    lengths.push(h);
                    areas.push(inp.grip_width_mm * t);
                }
            }
        };
        push_grip(&mut lengths, &mut areas);
        let lg = inp.gauge_length_mm;
        let h = lg / inp.gauge_elements as f64;
        for j in 0..inp.gauge_elements {
            let s = (j as f64 + 0.5) * h;
            let w = inp.gauge_width_mm * (1.0 - inp.taper * (1.0 - (2.0 * s / lg - 1.0).abs()));
            lengths.push(h);
            areas.push(w * t);
        }
        push_grip(&mut lengths, &mut areas);
        Bar {
            lengths,
            areas,
            material: Voce {
                e: inp.e_gpa * 1000.0,
                sigma0: inp.sigma0_mpa,
                q: inp.q_mpa,
                b: inp.b,
            },
        }
    }

    /// Number of elements.
    pub fn n_elements(&self) -> usize {
        self.lengths.len()
    }

    /// Smallest element area, mm².
    pub fn min_area(&self) -> f64 {
        self.areas.iter().copied().fold(f64::INFINITY, f64::min)
    }
}

/// The converged result at one prescribed displacement.
#[derive(Debug, Clone, PartialEq)]
pub struct StepResult {
    /// Prescribed end displacement, mm.
    pub displacement_mm: f64,
    /// Reaction force at the loaded end, N.
    pub force_n: f64,
    /// Global Newton iterations, summed over the increments of this step.
    pub iterations: usize,
    /// max |R| after the predictor and after each iteration of the last increment, N.
    pub residuals: Vec<f64>,
    /// Whether any element yielded in this step.
    pub plastic: bool,
    /// Halvings of the increment needed in this step.
    pub cutbacks: usize,
}

/// Where a failing increment sits.
#[derive(Debug, Clone, PartialEq)]
pub struct StepId {
    /// 1-based prescribed displacement number, and how many there are.
    pub step: usize,
    pub n_steps: usize,
    /// The prescribed displacement of the step, mm.
    pub displacement_mm: f64,
    /// End displacement of the failing increment, mm.
    pub increment_to_mm: f64,
    /// Halvings of the increment made in this step before the failure.
    pub cutbacks: usize,
}

impl fmt::Display for StepId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "step {} of {} (prescribed displacement {} mm), increment to {} mm after {} cut-backs",
            self.step, self.n_steps, self.displacement_mm, self.increment_to_mm, self.cutbacks
        )
    }
}

/// Solution controls.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Controls {
    /// Equal increments per prescribed displacement to start with (>= 1).
    pub substeps: usize,
    /// Cap on global Newton iterations per increment.
    pub max_iterations: usize,
    /// Cap on halvings of the increment per prescribed displacement.
    pub max_cutbacks: usize,
}

/// Why the solution stopped.
#[derive(Debug, Clone, PartialEq)]
pub enum SolveError {
    /// The global Newton iteration hit its cap, or its residual became non-finite.
    NotConverged {
        at: StepId,
        iterations: usize,
        residual_n: f64,
        tolerance_n: f64,
    },
    /// The return mapping failed in an element (non-finite strain).
    Local {
        at: StepId,
        element: usize,
        strain: f64,
    },
    /// The tangent matrix is singular: a section has lost all stiffness.
    Singular { at: StepId, node: usize },
}

impl fmt::Display for SolveError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            SolveError::NotConverged {
                at,
                iterations,
                residual_n,
                tolerance_n,
            } => write!(
                f,
                "{at}: global Newton did not converge in {iterations} iterations \
                 (residual {residual_n:e} N, tolerance {tolerance_n:e} N); \
                 try more `substeps`, `max_cutbacks` or a larger `max_iterations`"
            ),
            SolveError::Local {
                at,
                element,
                strain,
            } => write!(
                f,
                "{at}: return mapping failed in element {element} at strain {strain}"
            ),
            SolveError::Singular { at, node } => write!(
                f,
                "{at}: singular tangent matrix at node {node} (a section has lost its \
                 stiffness); check Q and b"
            ),
        }
    }
}

/// Solve the symmetric tridiagonal system (diagonal `d`, off-diagonal `o`) in place of
/// `rhs` by the Thomas algorithm. Returns the index of a vanishing pivot on failure.
fn solve_tridiagonal(d: &[f64], o: &[f64], rhs: &mut [f64]) -> Result<(), usize> {
    let m = d.len();
    if m == 0 {
        return Ok(());
    }
    // c[i] = o[i] / pivot_i: the upper factor of the LU decomposition.
    let mut c = vec![0.0; m];
    for i in 0..m {
        let (piv, prev) = if i == 0 {
            (d[0], 0.0)
        } else {
            (d[i] - o[i - 1] * c[i - 1], o[i - 1] * rhs[i - 1])
        };
        // A NaN pivot fails too.
        if piv.is_nan() || piv <= PIVOT_RTOL * d[i].abs() {
            return Err(i);
        }
        if i + 1 < m {
            c[i] = o[i] / piv;
        }
        rhs[i] = (rhs[i] - prev) / piv;
    }
    for i in (0..m - 1).rev() {
        rhs[i] -= c[i] * rhs[i + 1];
    }
    Ok(())
}

/// Committed (converged) state of the whole bar.
#[derive(Debug, Clone)]
struct Committed {
    u: Vec<f64>,
    states: Vec<State>,
    /// Consistent tangent modulus of each element at the converged state, MPa.
    moduli: Vec<f64>,
    /// Axial force of each element, N.
    forces: Vec<f64>,
}

/// Element forces (N), stiffnesses (N/mm), new states and whether any element yielded,
/// for displacements `u` from the committed `states`.
type Evaluation = (Vec<f64>, Vec<f64>, Vec<f64>, Vec<State>, bool);

fn evaluate(bar: &Bar, u: &[f64], states: &[State]) -> Result<Evaluation, (usize, f64)> {
    let ne = bar.n_elements();
    let mut forces = Vec::with_capacity(ne);
    let mut stiff = Vec::with_capacity(ne);
    let mut moduli = Vec::with_capacity(ne);
    let mut new_states = Vec::with_capacity(ne);
    let mut plastic = false;
    for e in 0..ne {
        let eps = (u[e + 1] - u[e]) / bar.lengths[e];
        let upd = bar
            .material
            .return_map(eps, states[e])
            .map_err(|f| (e, f.strain))?;
        forces.push(upd.stress * bar.areas[e]);
        stiff.push(upd.tangent * bar.areas[e] / bar.lengths[e]);
        moduli.push(upd.tangent);
        new_states.push(upd.state);
        plastic |= upd.plastic;
    }
    Ok((forces, stiff, moduli, new_states, plastic))
}

/// Residual at the free nodes: R_i = N_{i−1} − N_i, i = 1 … n_e − 1.
fn residual(forces: &[f64]) -> Vec<f64> {
    forces.windows(2).map(|w| w[0] - w[1]).collect()
}

fn max_abs(v: &[f64]) -> f64 {
    v.iter().fold(
        0.0_f64,
        |m, x| if x.is_nan() { f64::NAN } else { m.max(x.abs()) },
    )
}

/// Tangent matrix of the free nodes from element stiffnesses `k`: diagonal, off-diagonal.
fn tangent_matrix(k: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let d = k.windows(2).map(|w| w[0] + w[1]).collect();
    let o = if k.len() > 2 {
        k[1..k.len() - 1].iter().map(|&v| -v).collect()
    } else {
        Vec::new()
    };
    (d, o)
}

/// One load increment to end displacement `d_new`; updates `c` on success.
/// Returns the iteration count, the residual history and whether anything yielded.
fn increment(
    bar: &Bar,
    c: &mut Committed,
    d_new: f64,
    max_iterations: usize,
    tol: f64,
    at: impl Fn() -> StepId,
) -> Result<(usize, Vec<f64>, bool), SolveError> {
    let ne = bar.n_elements();
    let last = ne; // index of the loaded node
    let mut u = c.u.clone();
    let du_end = d_new - u[last];

    // Tangent predictor: K_n Δu_f = −R_n − K_fp Δδ with the last converged tangent.
    let k_n: Vec<f64> = (0..ne)
        .map(|e| c.moduli[e] * bar.areas[e] / bar.lengths[e])
        .collect();
    let (d, o) = tangent_matrix(&k_n);
    let mut rhs: Vec<f64> = residual(&c.forces).iter().map(|r| -r).collect();
    if let Some(r) = rhs.last_mut() {
        *r += k_n[ne - 1] * du_end;
    }
    solve_tridiagonal(&d, &o, &mut rhs).map_err(|i| SolveError::Singular {
        at: at(),
        node: i + 1,
    })?;
    for (i, du) in rhs.iter().enumerate() {
        u[i + 1] += du;
    }
    u[last] = d_new;

    let mut history = Vec::new();
    let mut iterations = 0;
    loop {
        let (forces, stiff, moduli, states, plastic) =
            evaluate(bar, &u, &c.states).map_err(|(element, strain)| SolveError::Local {
                at: at(),
                element,
                strain,
            })?;
        let r = residual(&forces);
        let norm = max_abs(&r);
        history.push(norm);
        if norm <= tol {
            c.u = u;
            c.states = states;
            c.moduli = moduli;
            c.forces = forces;
            return Ok((iterations, history, plastic));
        }
        if iterations >= max_iterations || !norm.is_finite() {
            return Err(SolveError::NotConverged {
                at: at(),
                iterations,
                residual_n: norm,
                tolerance_n: tol,
            });
        }
        let (d, o) = tangent_matrix(&stiff);
        let mut du: Vec<f64> = r.iter().map(|v| -v).collect();
        solve_tridiagonal(&d, &o, &mut du).map_err(|i| SolveError::Singular {
            at: at(),
            node: i + 1,
        })?;
        for (i, v) in du.iter().enumerate() {
            u[i + 1] += v;
        }
        iterations += 1;
    }
}

/// Load the bar through the prescribed end displacements (mm), each split into
/// `controls.substeps` equal increments from the previous one (halved again on
/// failure, at most `controls.max_cutbacks` times per step), and return the reaction
/// force at each.
///
/// # Errors
/// [`SolveError`] of the last failing increment, naming the step, once the cut-backs
/// are spent.
pub fn solve(
    bar: &Bar,
    displacements_mm: &[f64],
    controls: Controls,
) -> Result<Vec<StepResult>, SolveError> {
    debug_assert!(controls.substeps >= 1 && bar.n_elements() >= 1);
    let ne = bar.n_elements();
    let tol = RESIDUAL_RTOL * bar.material.sigma0 * bar.min_area();
    let mut c = Committed {
        u: vec![0.0; ne + 1],
        states: vec![State::default(); ne],
        moduli: vec![bar.material.e; ne],
        forces: vec![0.0; ne],
    };
    let mut out = Vec::with_capacity(displacements_mm.len());
    let mut prev = 0.0;
    for (s, &target) in displacements_mm.iter().enumerate() {
        let mut iterations = 0;
        let mut residuals: Vec<f64>;
        let mut plastic = false;
        let mut cutbacks = 0;
        let mut h = (target - prev) / controls.substeps as f64;
        let mut done = prev;
        loop {
            // The last increment ends exactly on the target, whatever the rounding.
            let remaining = target - done;
            let d_new = if remaining.abs() <= h.abs() * (1.0 + 1e-9) {
                target
            } else {
                done + h
            };
            let at = || StepId {
                step: s + 1,
                n_steps: displacements_mm.len(),
                displacement_mm: target,
                increment_to_mm: d_new,
                cutbacks,
            };
            match increment(bar, &mut c, d_new, controls.max_iterations, tol, at) {
                Ok((it, hist, p)) => {
                    iterations += it;
                    residuals = hist;
                    plastic |= p;
                    done = d_new;
                    if d_new == target {
                        break;
                    }
                }
                Err(e) => {
                    if cutbacks >= controls.max_cutbacks {
                        return Err(e);
                    }
                    cutbacks += 1;
                    h /= 2.0;
                }
            }
        }
        out.push(StepResult {
            displacement_mm: target,
            force_n: c.forces[ne - 1],
            iterations,
            residuals,
            plastic,
            cutbacks,
        });
        prev = target;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::input::parse_input;

    /// Specimen A of the example study (flat, 12.5 mm × 3 mm gauge, 1.5 % taper) at
    /// representative aluminium values E = 70 GPa, σ0 = 270 MPa, Q = 60 MPa, b = 15.
    fn specimen(extra: &str) -> Input {
        let text = format!(
            "E = 70\nsigma0 = 270\nQ = 60\nb = 15\n\
             gauge_length = 50\ngrip_length = 30\ngauge_width = 12.5\ngrip_width = 20\n\
             thickness = 3\ntaper = 0.015\n{extra}"
        );
        parse_input(&text).unwrap()
    }

    fn forces(inp: &Input) -> Vec<StepResult> {
        let bar = Bar::from_input(inp);
        solve(&bar, &inp.displacements_mm, inp.controls()).unwrap()
    }

    /// Elastic force vs the closed form: both sides are the same sum of L_i/(E A_i) in a
    /// different order, and the global solve is exact for a linear problem up to
    /// round-off (~1e-15 relative per operation, a few hundred operations).
    const ELASTIC_RTOL: f64 = 1e-10;

    /// Voce law on a uniform bar: σ is σy(ε − σ/E) up to the global tolerance
    /// (1e-10 of the yield force) and the local tolerance (1e-13 of σy).
    const VOCE_RTOL: f64 = 1e-9;

    /// Mesh refinement: halving the element size may change the force by at most 0.01 %.
    /// Why: the example's measurement noise is 0.05 kN on forces up to about 11.5 kN
    /// (specimen A) and 0.03 kN on up to about 5.5 kN (specimen B), at least 0.4 % of
    /// any force; discretisation error should be negligible beside it and beside the
    /// surrogate error, so we ask for a fortieth of that. The only discretisation error
    /// is the midpoint rule for ∫ ε(F/A(x)) dx over the taper (the force is the same in
    /// every section of a 1D bar): O(h²) where the integrand is smooth, and largest
    /// while the plastic front crosses an element. Observed (20 → 40 → 80 gauge
    /// elements): at most 4e-5 at 0.35 mm (front inside the gauge), 1e-7 to 5e-7
    /// elsewhere, falling by 4 per halving.
    const MESH_RTOL: f64 = 1e-4;

    #[test]
    fn elastic_force_is_the_series_stiffness() {
        // Bars in series: F = δ / Σ L_i / (E A_i) (e.g. J. M. Gere & B. J. Goodno,
        // Mechanics of Materials, chapter on axially loaded members, "bars with
        // prismatic segments"; quoted from memory).
        let inp =
            specimen("gauge_elements = 40\ngrip_elements = 4\ndisplacements = 0.05, 0.1, 0.2");
        let bar = Bar::from_input(&inp);
        let e = bar.material.e;
        let compliance: f64 = bar
            .lengths
            .iter()
            .zip(&bar.areas)
            .map(|(l, a)| l / (e * a))
            .sum();
        for r in forces(&inp) {
            assert!(!r.plastic, "step at {} mm yielded", r.displacement_mm);
            let expected = r.displacement_mm / compliance;
            assert!(
                (r.force_n - expected).abs() <= ELASTIC_RTOL * expected,
                "{} vs {}",
                r.force_n,
                expected
            );
        }
    }

    #[test]
    fn elastic_three_prismatic_segments_by_hand() {
        // Without taper: two ends 30 mm × 60 mm², gauge 50 mm × 37.5 mm², E = 70 000 MPa.
        // Σ L/(E A) = 2·30/(70000·60) + 50/(70000·37.5)
        //           = 1.428571…e-5 + 1.904761…e-5 = 3.333333…e-5 mm/N,
        // so δ = 0.1 mm gives F = 3000 N exactly (60/4.2e6 + 50/2.625e6 = 1/30000).
        let inp = specimen("displacements = 0.1\n").clone();
        let inp = Input { taper: 0.0, ..inp };
        let r = forces(&inp);
        assert!(
            (r[0].force_n - 3000.0).abs() <= ELASTIC_RTOL * 3000.0,
            "{}",
            r[0].force_n
        );
    }

    #[test]
    fn uniform_bar_follows_the_voce_law_at_every_step() {
        // Uniform bar: no taper, ends as wide as the gauge, so the strain is uniform,
        // ε = δ / L_total, σ = F / A and ε̄p = ε − σ/E; Voce (1948):
        // σ = σ0 + Q (1 − exp(−b ε̄p)) whenever ε̄p > 0.
        let mut inp = specimen("displacement_max = 6\ndisplacement_count = 60\nsubsteps = 1");
        inp.taper = 0.0;
        inp.grip_width_mm = inp.gauge_width_mm;
        let bar = Bar::from_input(&inp);
        let (area, total) = (bar.areas[0], bar.lengths.iter().sum::<f64>());
        let m = bar.material;
        let mut n_plastic = 0;
        for r in forces(&inp) {
            let eps = r.displacement_mm / total;
            let sigma = r.force_n / area;
            let eps_p = eps - sigma / m.e;
            if r.plastic {
                n_plastic += 1;
                let voce = m.sigma0 + m.q * (1.0 - (-m.b * eps_p).exp());
                assert!(
                    (sigma - voce).abs() <= VOCE_RTOL * voce,
                    "δ {}: σ {sigma} vs Voce {voce}",
                    r.displacement_mm
                );
            } else {
                assert!((sigma - m.e * eps).abs() <= VOCE_RTOL * sigma);
                assert!(sigma <= m.sigma0);
            }
        }
        assert!(n_plastic > 50, "only {n_plastic} plastic steps");
    }

    #[test]
    fn result_does_not_depend_on_the_increment_size_under_monotonic_loading() {
        // Backward Euler lands on σ = σy(α) in each step (see material.rs), so
        // monotonic loading gives the same forces with 1 or 10 increments per step.
        let coarse = forces(&specimen("displacements = 0.2, 1.0, 3.5\nsubsteps = 1"));
        let fine = forces(&specimen("displacements = 0.2, 1.0, 3.5\nsubsteps = 10"));
        for (a, b) in coarse.iter().zip(&fine) {
            assert!((a.force_n - b.force_n).abs() <= VOCE_RTOL * b.force_n);
        }
    }

    #[test]
    fn halving_the_element_size_changes_the_force_by_less_than_the_tolerance() {
        let list = "displacements = 0.1, 0.3, 0.35, 0.4, 0.45, 0.6, 1.0, 2.0, 3.5";
        let f1 = forces(&specimen(&format!(
            "gauge_elements = 20\ngrip_elements = 2\n{list}"
        )));
        let f2 = forces(&specimen(&format!(
            "gauge_elements = 40\ngrip_elements = 4\n{list}"
        )));
        let f3 = forces(&specimen(&format!(
            "gauge_elements = 80\ngrip_elements = 8\n{list}"
        )));
        for ((a, b), c) in f1.iter().zip(&f2).zip(&f3) {
            let d12 = (a.force_n - b.force_n).abs() / b.force_n;
            let d23 = (b.force_n - c.force_n).abs() / c.force_n;
            assert!(
                d12 <= MESH_RTOL,
                "δ {}: 20→40 elements {d12:e}",
                b.displacement_mm
            );
            assert!(
                d23 <= MESH_RTOL,
                "δ {}: 40→80 elements {d23:e}",
                b.displacement_mm
            );
            // Second order where the whole gauge is either elastic or plastic.
            if [0.1, 1.0, 2.0, 3.5].contains(&b.displacement_mm) {
                let order = d12 / d23;
                assert!(
                    (3.5..4.5).contains(&order),
                    "δ {}: ratio {order}",
                    b.displacement_mm
                );
            }
        }
    }

    #[test]
    fn elastic_mesh_converges_to_the_exact_tapered_compliance() {
        // Exact elastic compliance of a gauge whose area falls linearly from A_g to
        // A_m = A_g (1 − τ) at mid-gauge: 2 ∫_0^{L/2} dx / (E A(x)) =
        // L ln(A_g / A_m) / (E (A_g − A_m)). Midpoint-rule error is O(h²): the error
        // must drop by about 4 when the elements halve.
        let (e, lg, ag, tau) = (70_000.0_f64, 50.0_f64, 37.5_f64, 0.015_f64);
        let am = ag * (1.0 - tau);
        let exact_gauge = lg * (ag / am).ln() / (e * (ag - am));
        let exact = exact_gauge + 2.0 * 30.0 / (e * 60.0);
        let mut errs = Vec::new();
        for n in [4, 8, 16] {
            let inp = specimen(&format!("gauge_elements = {n}\ndisplacements = 0.1"));
            let f = forces(&inp)[0].force_n;
            errs.push((f - 0.1 / exact).abs() / (0.1 / exact));
        }
        assert!(errs[2] < 1e-6, "{errs:?}");
        let ratio = errs[1] / errs[2];
        assert!(
            (3.5..4.5).contains(&ratio),
            "error ratio {ratio} ({errs:?})"
        );
    }

    #[test]
    fn global_newton_converges_quadratically_on_a_plastic_step() {
        // Newton with the consistent tangent: r₁ ≈ C r₀² near the solution (Simo & Hughes
        // 1998, ch. 1–2, from memory). Take the converged solution u* of a plastic
        // increment (1.0 → 1.5 mm, whole gauge yielding, ends elastic), perturb it by
        // s·v, make one Newton iteration from the same committed state and compare the
        // residuals before (r₀) and after (r₁). Quadratic convergence: r₁ / r₀² stays
        // constant as s shrinks, so r₁ falls by about 4 when s halves; linear convergence
        // would give a constant r₁ / r₀ instead.
        let inp = specimen("displacements = 1.0");
        let bar = Bar::from_input(&inp);
        let ne = bar.n_elements();
        let tol = RESIDUAL_RTOL * bar.material.sigma0 * bar.min_area();
        let at = || StepId {
            step: 1,
            n_steps: 1,
            displacement_mm: 0.0,
            increment_to_mm: 0.0,
            cutbacks: 0,
        };
        let mut c = Committed {
            u: vec![0.0; ne + 1],
            states: vec![State::default(); ne],
            moduli: vec![bar.material.e; ne],
            forces: vec![0.0; ne],
        };
        for d in [0.25, 0.5, 0.75, 1.0] {
            increment(&bar, &mut c, d, 25, tol, at).unwrap();
        }
        let committed = c.states.clone();
        let mut converged = c.clone();
        let (n_iter, history, plastic) = increment(&bar, &mut converged, 1.5, 25, tol, at).unwrap();
        assert!(plastic && n_iter <= 4, "{n_iter} iterations: {history:?}");

        // One Newton iteration from u; returns (r₀, r₁) in N.
        let one_iteration = |u: &[f64]| {
            let (f0, k0, _, _, _) = evaluate(&bar, u, &committed).unwrap();
            let r0 = residual(&f0);
            let (d, o) = tangent_matrix(&k0);
            let mut du: Vec<f64> = r0.iter().map(|v| -v).collect();
            solve_tridiagonal(&d, &o, &mut du).unwrap();
            let mut u1 = u.to_vec();
            for (i, v) in du.iter().enumerate() {
                u1[i + 1] += v;
            }
            let (f1, _, _, _, _) = evaluate(&bar, &u1, &committed).unwrap();
            (max_abs(&r0), max_abs(&residual(&f1)))
        };
        let mut c_ratio = Vec::new();
        let mut r1s = Vec::new();
        for s in [1.6e-4, 8e-5, 4e-5, 2e-5] {
            let u: Vec<f64> = converged
                .u
                .iter()
                .enumerate()
                .map(|(i, x)| x + s * (std::f64::consts::PI * i as f64 / ne as f64).sin())
                .collect();
            let (r0, r1) = one_iteration(&u);
            // Keep r₁ a hundred times above round-off in the forces (about 1e-11 N on
            // 1e4 N, the floor the converged residual histories reach) so that the
            // ratios measure the iteration, not the arithmetic.
            assert!(r1 > 1e-9 && r1 < 1e-2 * r0, "s {s}: r0 {r0:e}, r1 {r1:e}");
            c_ratio.push(r1 / (r0 * r0));
            r1s.push(r1);
        }
        for w in r1s.windows(2) {
            let fall = w[0] / w[1];
            assert!((3.0..5.0).contains(&fall), "r1 {r1s:?}, r1/r0² {c_ratio:?}");
        }
        // Observed: r1/r0² = 3.873e-7 1/N at all four sizes, to 4 digits.
        for c in &c_ratio {
            assert!((c / c_ratio[0] - 1.0).abs() < 0.01, "r1/r0² {c_ratio:?}");
        }
    }

    #[test]
    fn unloading_is_elastic_with_the_plastic_set() {
        // Load to 2 mm, unload by 0.1 mm: the force drops by 0.1 mm times the elastic
        // series stiffness, because every element unloads elastically.
        let inp = specimen("displacements = 2.0, 1.9");
        let bar = Bar::from_input(&inp);
        let compliance: f64 = bar
            .lengths
            .iter()
            .zip(&bar.areas)
            .map(|(l, a)| l / (bar.material.e * a))
            .sum();
        let r = forces(&inp);
        let drop = r[0].force_n - r[1].force_n;
        assert!((drop - 0.1 / compliance).abs() <= ELASTIC_RTOL * drop * 100.0);
    }

    #[test]
    fn iteration_cap_names_the_step() {
        let inp = specimen("displacements = 0.1, 2.0\nmax_iterations = 1\nmax_cutbacks = 0");
        let bar = Bar::from_input(&inp);
        let e = solve(&bar, &inp.displacements_mm, inp.controls()).unwrap_err();
        let msg = e.to_string();
        assert!(
            msg.starts_with(
                "step 2 of 2 (prescribed displacement 2 mm), increment to 2 mm after 0 cut-backs: \
                 global Newton did not converge in 1 iterations"
            ),
            "{msg}"
        );
    }

    #[test]
    fn mesh_has_the_taper_minimum_at_mid_gauge() {
        let inp = specimen("gauge_elements = 40\ngrip_elements = 4\ndisplacements = 1");
        let bar = Bar::from_input(&inp);
        assert_eq!(bar.n_elements(), 48);
        assert!((bar.lengths.iter().sum::<f64>() - 110.0).abs() < 1e-12);
        let gauge = &bar.areas[4..44];
        let min = gauge.iter().copied().fold(f64::INFINITY, f64::min);
        assert_eq!(min, gauge[19]);
        assert_eq!(gauge[19], gauge[20]);
        // Midpoint of element 19 sits 0.625 mm from mid-gauge: τ·(1 − 0.625/25) off A_g.
        let expect = 37.5 * (1.0 - 0.015 * (1.0 - 0.625 / 25.0));
        assert!((min - expect).abs() < 1e-12);
        assert_eq!(bar.areas[0], 60.0);
    }
}
