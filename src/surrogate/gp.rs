//! Gaussian-process regression at fixed hyperparameters: factorisation, log marginal
//! likelihood with its gradient, prediction and closed-form leave-one-out.
//!
//! A trend h(x)ᵀβ with a flat prior on β is integrated out (generalised least squares),
//! so predictions and variances include the trend's uncertainty.
//!
//! # References
//! Rasmussen & Williams (2006), Gaussian Processes for Machine Learning, MIT Press:
//! Alg. 2.1; §2.7 eqs. 2.41–2.45 (explicit basis functions); §5.4.1 eq. 5.9 (gradient);
//! §5.4.2 eqs. 5.10–5.12 (leave-one-out). Harville, D. A. (1974), Bayesian inference
//! for variance components using only error contrasts, Biometrika 61(2), 383–385 (the
//! restricted likelihood the basis-function form reduces to).

use super::kernel::Kernel;
use super::SurrogateError;
use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, ShapeBuilder};
use ndarray_linalg::{
    CholeskyFactorized, Diag, FactorizeC, InverseC, SolveC, SolveTriangular, UPLO,
};

/// Trend basis h(x).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Trend {
    /// No trend: a zero-mean GP.
    Zero,
    /// h(x) = 1.
    Constant,
    /// h(x) = (1, x_1, …, x_d).
    Linear,
}

impl Trend {
    fn width(self, d: usize) -> usize {
        match self {
            Trend::Zero => 0,
            Trend::Constant => 1,
            Trend::Linear => 1 + d,
        }
    }

    fn basis_row(self, x: ArrayView1<f64>) -> Array1<f64> {
        match self {
            Trend::Zero => Array1::zeros(0),
            Trend::Constant => Array1::ones(1),
            Trend::Linear => {
                let mut h = Array1::ones(1 + x.len());
                for (i, v) in x.iter().enumerate() {
                    h[i + 1] = *v;
                }
                h
            }
        }
    }

    /// Name used in records.
    pub fn name(self) -> &'static str {
        match self {
            Trend::Zero => "zero",
            Trend::Constant => "constant",
            Trend::Linear => "linear",
        }
    }
}

/// Hyperparameters on the log scale: θ = (ln σ², ln ℓ_1 … ln ℓ_d, ln η), with
/// K = σ² (P + η I): the nugget η is relative to the signal variance, so its floor bounds
/// the condition number of K by about (n + η)/η whatever σ² is.
#[derive(Debug, Clone, PartialEq)]
pub struct Hyper {
    pub ln_signal_var: f64,
    pub ln_length_scales: Vec<f64>,
    /// ln η, the nugget relative to σ².
    pub ln_nugget: f64,
}

impl Hyper {
    /// As one vector (ln σ², ln ℓ…, ln g).
    pub fn to_vec(&self) -> Vec<f64> {
        let mut v = vec![self.ln_signal_var];
        v.extend(&self.ln_length_scales);
        v.push(self.ln_nugget);
        v
    }

    /// From one vector (ln σ², ln ℓ…, ln g).
    pub fn from_slice(v: &[f64]) -> Self {
        Self {
            ln_signal_var: v[0],
            ln_length_scales: v[1..v.len() - 1].to_vec(),
            ln_nugget: v[v.len() - 1],
        }
    }
}

/// A GP conditioned on training data at fixed hyperparameters.
#[derive(Debug, Clone)]
pub struct Gp {
    pub kernel: Kernel,
    pub trend: Trend,
    pub hyper: Hyper,
    x: Array2<f64>,
    /// Lower Cholesky factor of K (used for every solve in prediction).
    l: Array2<f64>,
    k_inv: Array2<f64>,
    k_inv_h: Array2<f64>,
    a_inv: Array2<f64>,
    beta: Array1<f64>,
    alpha: Array1<f64>,
    p_diag: Array1<f64>,
    /// ln p(y | X, θ) (restricted form when a trend is integrated out).
    pub ln_marginal_likelihood: f64,
    /// Extra diagonal jitter that was needed to factor K (0 when none).
    pub jitter: f64,
    /// 1/ℓ_d², kept for prediction.
    inv_l2: Vec<f64>,
    /// [`Gp::point_rows`], made at the first prediction that needs them.
    point_rows: std::sync::OnceLock<Array2<f64>>,
}

thread_local! {
    /// Scratch space of [`Gp::predict_point`] (x, k* and the product with its rows), so
    /// the calibration's inner loop allocates nothing per prediction.
    static POINT_SCRATCH: std::cell::RefCell<Vec<f64>> = const { std::cell::RefCell::new(Vec::new()) };
}

fn hyper_inv_l2(h: &Hyper) -> Vec<f64> {
    h.ln_length_scales
        .iter()
        .map(|l| (-2.0 * l).exp())
        .collect()
}

/// Largest jitter tried before giving up on a factorisation.
pub const MAX_JITTER: f64 = 1e-4;

fn covariance(kernel: Kernel, h: &Hyper, a: ArrayView2<f64>, b: ArrayView2<f64>) -> Array2<f64> {
    let s2 = h.ln_signal_var.exp();
    let inv_l: Vec<f64> = h.ln_length_scales.iter().map(|l| (-l).exp()).collect();
    Array2::from_shape_fn((a.nrows(), b.nrows()), |(i, j)| {
        let mut r2 = 0.0;
        for (d, il) in inv_l.iter().enumerate() {
            let t = (a[[i, d]] - b[[j, d]]) * il;
            r2 += t * t;
        }
        s2 * kernel.corr(r2.sqrt())
    })
}

impl Gp {
    /// Condition on training inputs `x` (n × d) and outputs `y` (n).
    ///
    /// # Formula
    /// K = σ² P(X, X) + g I; A = Hᵀ K⁻¹ H; β̂ = A⁻¹ Hᵀ K⁻¹ y; α = K⁻¹ (y − H β̂);
    /// ln p = −½ yᵀα − ½ ln|K| − ½ ln|A| − (n − m)/2 ln 2π (R&W eq. 2.45 with m basis
    /// functions; with no trend it is eq. 2.30).
    ///
    /// # Errors
    /// [`SurrogateError::NotPositiveDefinite`] when K cannot be factored even with
    /// [`MAX_JITTER`] added to its diagonal.
    pub fn fit(
        x: ArrayView2<f64>,
        y: ArrayView1<f64>,
        kernel: Kernel,
        trend: Trend,
        hyper: Hyper,
    ) -> Result<Self, SurrogateError> {
        let n = x.nrows();
        let d = x.ncols();
        let m = trend.width(d);
        if !hyper.to_vec().iter().all(|v| v.is_finite()) {
            return Err(SurrogateError::NonFiniteHyperparameters);
        }
        // A search step can propose ln σ² so far out that σ² under- or overflows; the
        // jitter below is relative to σ², so it could never grow from 0 (an endless
        // loop, seen on outputs that a linear trend fits exactly).
        let s2 = hyper.ln_signal_var.exp();
        if !(s2.is_finite() && s2 > 0.0) {
            return Err(SurrogateError::NotPositiveDefinite { n, jitter: 0.0 });
        }
        let mut k = covariance(kernel, &hyper, x, x);
        let g = hyper.ln_signal_var.exp() * hyper.ln_nugget.exp();
        for i in 0..n {
            k[[i, i]] += g;
        }
        let mut jitter = 0.0;
        let factor = loop {
            match k.factorizec(UPLO::Lower) {
                Ok(f) => break f,
                Err(_) => {
                    let next = if jitter == 0.0 {
                        1e-10 * (hyper.ln_signal_var.exp())
                    } else {
                        jitter * 10.0
                    };
                    if next.is_nan() || next > MAX_JITTER * hyper.ln_signal_var.exp() {
                        return Err(SurrogateError::NotPositiveDefinite { n, jitter: next });
                    }
                    for i in 0..n {
                        k[[i, i]] += next - jitter;
                    }
                    jitter = next;
                }
            }
        };
        let ln_det_k = ln_det(&factor);
        let h = Array2::from_shape_fn((n, m), |(i, j)| trend.basis_row(x.row(i))[j]);
        let solve = |b: ArrayView1<f64>| {
            factor
                .solvec(&b.to_owned())
                .map_err(|_| SurrogateError::NotPositiveDefinite { n, jitter })
        };
        let k_inv_y = solve(y)?;
        let mut k_inv_h = Array2::zeros((n, m));
        for j in 0..m {
            k_inv_h.column_mut(j).assign(&solve(h.column(j))?);
        }
        let k_inv = factor
            .invc()
            .map_err(|_| SurrogateError::NotPositiveDefinite { n, jitter })?;
        // Column-major, the layout LAPACK takes without a copy, for the triangular solves
        // of every prediction.
        let mut l = Array2::zeros((n, n).f());
        l.assign(&factor.factor);
        let (a_inv, beta, ln_det_a) = if m > 0 {
            let a = h.t().dot(&k_inv_h);
            let fa = a
                .factorizec(UPLO::Lower)
                .map_err(|_| SurrogateError::TrendNotIdentifiable { n, m })?;
            let a_inv = fa
                .invc()
                .map_err(|_| SurrogateError::TrendNotIdentifiable { n, m })?;
            let beta = a_inv.dot(&h.t().dot(&k_inv_y));
            (a_inv, beta, ln_det(&fa))
        } else {
            (Array2::zeros((0, 0)), Array1::zeros(0), 0.0)
        };
        let alpha = &k_inv_y - &k_inv_h.dot(&beta);
        // diag of P = K⁻¹ − K⁻¹H A⁻¹ HᵀK⁻¹.
        let p_diag = Array1::from_shape_fn(n, |i| {
            let r = k_inv_h.row(i);
            k_inv[[i, i]] - r.dot(&a_inv.dot(&r))
        });
        let lml = -0.5 * y.dot(&alpha)
            - 0.5 * ln_det_k
            - 0.5 * ln_det_a
            - 0.5 * (n - m) as f64 * (2.0 * std::f64::consts::PI).ln();
        let hyper_copy = hyper.clone();
        Ok(Self {
            kernel,
            trend,
            hyper,
            x: x.as_standard_layout().into_owned(),
            l,
            k_inv,
            k_inv_h,
            a_inv,
            beta,
            alpha,
            p_diag,
            ln_marginal_likelihood: lml,
            jitter,
            inv_l2: hyper_inv_l2(&hyper_copy),
            point_rows: std::sync::OnceLock::new(),
        })
    }

    /// Gradient of [`Gp::ln_marginal_likelihood`] with respect to (ln σ², ln ℓ…, ln η).
    ///
    /// # Formula
    /// ∂ ln p / ∂θ_j = ½ tr((α αᵀ − P) ∂K/∂θ_j), P = K⁻¹ − K⁻¹H A⁻¹ HᵀK⁻¹ (R&W eq. 5.9,
    /// with P in place of K⁻¹ when a trend is integrated out); ∂K/∂ln σ² = K,
    /// ∂K/∂ln η = σ²η I, ∂K_ab/∂ln ℓ_d = σ² g(r)(Δ_d/ℓ_d)².
    pub fn gradient(&self) -> Vec<f64> {
        let n = self.x.nrows();
        let d = self.x.ncols();
        let s2 = self.hyper.ln_signal_var.exp();
        let g = s2 * self.hyper.ln_nugget.exp();
        let p = &self.k_inv - &self.k_inv_h.dot(&self.a_inv).dot(&self.k_inv_h.t());
        let inv_l: Vec<f64> = self
            .hyper
            .ln_length_scales
            .iter()
            .map(|l| (-l).exp())
            .collect();
        let mut grad = vec![0.0; d + 2];
        let mut t = vec![0.0; d];
        // W = ααᵀ − P is symmetric: visit each pair once and double the off-diagonal.
        for a in 0..n {
            let w = self.alpha[a] * self.alpha[a] - p[[a, a]];
            grad[0] += w * (s2 + g);
            grad[d + 1] += w * g;
            for b in (a + 1)..n {
                let w = 2.0 * (self.alpha[a] * self.alpha[b] - p[[a, b]]);
                let mut r2 = 0.0;
                for dd in 0..d {
                    t[dd] = (self.x[[a, dd]] - self.x[[b, dd]]) * inv_l[dd];
                    r2 += t[dd] * t[dd];
                }
                let (c, gr) = self.kernel.corr_and_neg_d(r2.sqrt());
                grad[0] += w * s2 * c;
                let wg = w * s2 * gr;
                for dd in 0..d {
                    grad[1 + dd] += wg * t[dd] * t[dd];
                }
            }
        }
        grad.iter().map(|v| 0.5 * v).collect()
    }

    /// Predictive mean and variance of the latent function at `xs` (rows).
    ///
    /// # Formula
    /// m(x*) = h*ᵀβ̂ + k*ᵀα; v(x*) = k** − k*ᵀK⁻¹k* + Rᵀ A⁻¹ R, R = h* − HᵀK⁻¹k*
    /// (R&W eqs. 2.25–2.26 and 2.42).
    pub fn predict(&self, xs: ArrayView2<f64>) -> (Array1<f64>, Array1<f64>) {
        let ks = covariance(self.kernel, &self.hyper, xs, self.x.view());
        let s2 = self.hyper.ln_signal_var.exp();
        // v = L⁻¹ k*: the variance by triangular solves, not by an explicit inverse.
        let v = self
            .l
            .solve_triangular(UPLO::Lower, Diag::NonUnit, &ks.t().to_owned())
            .expect("triangular solve with a Cholesky factor of positive diagonal");
        let n_star = xs.nrows();
        let mut mean = Array1::zeros(n_star);
        let mut var = Array1::zeros(n_star);
        for i in 0..n_star {
            let k = ks.row(i);
            let h = self.trend.basis_row(xs.row(i));
            mean[i] = h.dot(&self.beta) + k.dot(&self.alpha);
            let vi = v.column(i);
            let mut var_i = s2 - vi.dot(&vi);
            if !self.beta.is_empty() {
                let r = &h - &self.k_inv_h.t().dot(&k);
                var_i += r.dot(&self.a_inv.dot(&r));
            }
            var[i] = var_i.max(0.0);
        }
        (mean, var)
    }

    /// Joint predictive mean and covariance of the latent function at the rows of `xs`.
    ///
    /// # Formula
    /// m = H*β̂ + K*α; C = K** − K* K⁻¹ K*ᵀ + Rᵀ A⁻¹ R, R = H*ᵀ − Hᵀ K⁻¹ K*ᵀ
    /// (R&W eqs. 2.24 and 2.42, for several test points at once).
    pub fn predict_cov(&self, xs: ArrayView2<f64>) -> (Array1<f64>, Array2<f64>) {
        let ks = covariance(self.kernel, &self.hyper, xs, self.x.view());
        let kss = covariance(self.kernel, &self.hyper, xs, xs);
        let v = self
            .l
            .solve_triangular(UPLO::Lower, Diag::NonUnit, &ks.t().to_owned())
            .expect("triangular solve with a Cholesky factor of positive diagonal");
        let m = xs.nrows();
        let mut cov = kss - v.t().dot(&v);
        let mut mean = ks.dot(&self.alpha);
        if !self.beta.is_empty() {
            let hs = Array2::from_shape_fn((m, self.beta.len()), |(i, j)| {
                self.trend.basis_row(xs.row(i))[j]
            });
            mean += &hs.dot(&self.beta);
            let r = hs.t().to_owned() - self.k_inv_h.t().dot(&ks.t());
            cov += &r.t().dot(&self.a_inv.dot(&r));
        }
        // Symmetrise away round-off.
        let c2 = (&cov + &cov.t()) * 0.5;
        (mean, c2)
    }

    /// Nugget variance σ²η added to the diagonal of K (training outputs are taken to
    /// carry it; the latent prediction does not).
    pub fn nugget_var(&self) -> f64 {
        (self.hyper.ln_signal_var + self.hyper.ln_nugget).exp()
    }

    /// Number of training points n.
    pub fn n_train(&self) -> usize {
        self.x.nrows()
    }

    /// Number of trend coefficients q.
    pub fn n_trend(&self) -> usize {
        self.beta.len()
    }

    /// Gradient of the predictive mean with respect to the input x (the unit box).
    ///
    /// # Formula
    /// ∂m/∂x_d = ∂h(x)ᵀβ̂/∂x_d + Σ_i α_i ∂k(x, x_i)/∂x_d, with
    /// ∂k(x, x_i)/∂x_d = −σ² g(r) (x_d − x_id)/ℓ_d², g(r) = −ρ′(r)/r
    /// ([`Kernel::neg_dcorr_over_r`], finite at r = 0 for the three kernels), and
    /// ∂h(x)ᵀβ̂/∂x_d = β̂_(d+1) for the linear trend, 0 otherwise (differentiating R&W
    /// eq. 2.41's mean, the chain rule through r² = Σ_d (x_d − x_id)²/ℓ_d²).
    ///
    /// # Panics
    /// If `x` has the wrong length.
    pub fn mean_gradient(&self, x: ArrayView1<f64>) -> Array1<f64> {
        let (_, dk) = self.cross_cov(x);
        self.mean_gradient_from(&dk)
    }

    /// ∂m/∂x from ∂k*/∂x (n × d): αᵀ ∂k*/∂x plus the linear trend's slopes.
    fn mean_gradient_from(&self, dk: &Array2<f64>) -> Array1<f64> {
        let mut grad = self.alpha.dot(dk);
        if self.trend == Trend::Linear {
            for (dd, g) in grad.iter_mut().enumerate() {
                *g += self.beta[dd + 1];
            }
        }
        grad
    }

    /// k(x, x_i) for every training point i and ∂k(x, x_i)/∂x_d (n × d):
    /// −σ² g(r_i) (x_d − x_id)/ℓ_d² ([`Kernel::neg_dcorr_over_r`]). (Without the
    /// derivatives, [`Self::predict_point`] fills k in its scratch buffer.)
    fn cross_cov(&self, x: ArrayView1<f64>) -> (Array1<f64>, Array2<f64>) {
        let d = self.x.ncols();
        let n = self.x.nrows();
        assert_eq!(x.len(), d, "input of the wrong dimension");
        let s2 = self.hyper.ln_signal_var.exp();
        let mut k = Array1::zeros(n);
        let mut dk = Array2::zeros((n, d));
        for (i, xi) in self.x.rows().into_iter().enumerate() {
            let mut r2 = 0.0;
            for dd in 0..d {
                r2 += (x[dd] - xi[dd]).powi(2) * self.inv_l2[dd];
            }
            let (rho, g) = self.kernel.corr_and_neg_d(r2.sqrt());
            k[i] = s2 * rho;
            for dd in 0..d {
                dk[[i, dd]] = -s2 * g * (x[dd] - xi[dd]) * self.inv_l2[dd];
            }
        }
        (k, dk)
    }

    /// The rows P = [(K⁻¹H)ᵀ; αᵀ] ((q + 1) × n, column-major) that give HᵀK⁻¹k* and αᵀk*
    /// in one matrix-vector product (BLAS `dgemv`).
    fn point_rows(&self) -> &Array2<f64> {
        self.point_rows.get_or_init(|| {
            let n = self.x.nrows();
            let q = self.beta.len();
            let mut p = Array2::zeros((q + 1, n).f());
            p.slice_mut(s![..q, ..]).assign(&self.k_inv_h.t());
            p.row_mut(q).assign(&self.alpha);
            p
        })
    }

    /// Mean and variance (not clamped) at x from k* = k(x, X): `out` receives
    /// v = L⁻¹k* (a BLAS triangular solve), then HᵀK⁻¹k* and αᵀk* ([`Self::point_rows`]),
    /// n + q + 1 values. The one place both [`Self::predict_point`] and
    /// [`Self::predict_with_gradient`] evaluate R&W eqs. 2.41–2.42, so they agree to the
    /// last digit.
    fn moments_from(&self, x: &[f64], k: &[f64], out: &mut [f64]) -> (f64, f64) {
        let n = self.x.nrows();
        let q = self.beta.len();
        let (v, rest) = out.split_at_mut(n);
        v.copy_from_slice(k);
        crate::blas::trsv_lower_f(false, self.l.view(), v);
        crate::blas::gemv_f(false, self.point_rows().view(), k, rest);
        let mut var = self.hyper.ln_signal_var.exp() - v.iter().map(|t| t * t).sum::<f64>();
        let mut mean = rest[q];
        if q > 0 {
            // h* = (1) or (1, x) ([`Trend::basis_row`]); R = h* − HᵀK⁻¹k*;
            // var += Rᵀ A⁻¹ R.
            assert_eq!(q, self.trend.width(x.len()), "a trend of another form");
            let h = |j: usize| if j == 0 { 1.0 } else { x[j - 1] };
            let r = |j: usize| h(j) - rest[j];
            for a in 0..q {
                mean += h(a) * self.beta[a];
                let ra = r(a);
                var += ra * ra * self.a_inv[[a, a]];
                for b in 0..a {
                    var += ra * r(b) * (self.a_inv[[a, b]] + self.a_inv[[b, a]]);
                }
            }
        }
        (mean, var)
    }

    /// Predictive mean and variance at one input `x` (unit box): [`Self::predict`] for a
    /// single point, without the batch's temporaries (the calibration's inner loop).
    ///
    /// # Formula
    /// R&W eqs. 2.41–2.42 as in [`Self::predict`], by [`Self::moments_from`].
    ///
    /// # Panics
    /// If `x` has the wrong length.
    pub fn predict_point(&self, x: ArrayView1<f64>) -> (f64, f64) {
        let n = self.x.nrows();
        let q = self.beta.len();
        let d = self.x.ncols();
        assert_eq!(x.len(), d, "input of the wrong dimension");
        let s2 = self.hyper.ln_signal_var.exp();
        let train = self
            .x
            .as_slice()
            .expect("training inputs kept in standard layout");
        POINT_SCRATCH.with_borrow_mut(|buf| {
            buf.clear();
            buf.resize(d + n + n + q + 1, 0.0);
            let (xv, rest) = buf.split_at_mut(d);
            let (k, out) = rest.split_at_mut(n);
            for (a, b) in xv.iter_mut().zip(x.iter()) {
                *a = *b;
            }
            for (ki, xi) in k.iter_mut().zip(train.chunks_exact(d)) {
                let r2: f64 = xv
                    .iter()
                    .zip(xi)
                    .zip(&self.inv_l2)
                    .map(|((a, b), w)| (a - b).powi(2) * w)
                    .sum();
                *ki = s2 * self.kernel.corr(r2.sqrt());
            }
            let (mean, var) = self.moments_from(xv, k, out);
            (mean, var.max(0.0))
        })
    }

    /// Predictive mean and variance at one input `x` (unit box) with their gradients
    /// with respect to `x`: (m, v, ∂m/∂x, ∂v/∂x).
    ///
    /// # Formula
    /// With k_i = σ² ρ(r_i), ∂k_i/∂x_d = −σ² g(r_i) (x_d − x_id)/ℓ_d² (as in
    /// [`Self::mean_gradient`]), q = K⁻¹k* and R = h* − HᵀK⁻¹k*:
    /// ∂m/∂x_d = ∂h*ᵀβ̂/∂x_d + αᵀ ∂k*/∂x_d;
    /// ∂v/∂x_d = −2 qᵀ ∂k*/∂x_d + 2 Rᵀ A⁻¹ (∂h*/∂x_d − (K⁻¹H)ᵀ ∂k*/∂x_d),
    /// differentiating R&W eqs. 2.41–2.42 (k** = σ² does not depend on x). Where the
    /// variance is clamped at 0 (round-off) its gradient is 0.
    ///
    /// # Panics
    /// If `x` has the wrong length.
    pub fn predict_with_gradient(
        &self,
        x: ArrayView1<f64>,
    ) -> (f64, f64, Array1<f64>, Array1<f64>) {
        let d = self.x.ncols();
        let n = self.x.nrows();
        let nq = self.beta.len();
        let (k, dk) = self.cross_cov(x);
        let h = self.trend.basis_row(x);
        // v = L⁻¹k*, HᵀK⁻¹k* and αᵀk* as [`Self::predict_point`] finds them
        // ([`Self::moments_from`], so the two agree to the last digit), then q = L⁻ᵀv.
        let mut out = vec![0.0; n + nq + 1];
        let xs = x.to_vec();
        let (mean, mut var) = self.moments_from(&xs, k.as_slice().expect("contiguous"), &mut out);
        let mut q = Array1::from(out[..n].to_vec());
        crate::blas::trsv_lower_f(true, self.l.view(), q.as_slice_mut().expect("contiguous"));
        let dmean = self.mean_gradient_from(&dk);
        let mut dvar = q.dot(&dk) * -2.0;
        if !self.beta.is_empty() {
            let r = &h - &ArrayView1::from(&out[n..n + nq]);
            let ar = self.a_inv.dot(&r);
            // ∂R/∂x_d = ∂h/∂x_d − (K⁻¹H)ᵀ ∂k/∂x_d; Rᵀ A⁻¹ (K⁻¹H)ᵀ ∂k = ((K⁻¹H) A⁻¹R)ᵀ ∂k.
            let w = self.k_inv_h.dot(&ar);
            dvar = dvar - w.dot(&dk) * 2.0;
            if self.trend == Trend::Linear {
                for dd in 0..d {
                    dvar[dd] += 2.0 * ar[dd + 1];
                }
            }
        }
        if var <= 0.0 {
            var = 0.0;
            dvar.fill(0.0);
        }
        (mean, var, dmean, dvar)
    }

    /// Leave-one-out predictive means and variances of the training outputs `y`.
    ///
    /// # Formula
    /// μ₋ᵢ = yᵢ − αᵢ / Pᵢᵢ, σ²₋ᵢ = 1 / Pᵢᵢ (R&W eqs. 5.12, with the trend re-estimated
    /// without point i through P; Dubrule 1983).
    pub fn leave_one_out(&self, y: ArrayView1<f64>) -> (Array1<f64>, Array1<f64>) {
        let mean = Array1::from_shape_fn(y.len(), |i| y[i] - self.alpha[i] / self.p_diag[i]);
        let var = self.p_diag.mapv(|p| 1.0 / p);
        (mean, var)
    }
}

fn ln_det(f: &CholeskyFactorized<ndarray::OwnedRepr<f64>>) -> f64 {
    let l = &f.factor;
    2.0 * (0..l.nrows()).map(|i| l[[i, i]].ln()).sum::<f64>()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    /// A search step far outside the box makes σ² = e^(ln σ²) underflow to 0 or
    /// overflow to ∞; fitting must fail at once, not loop looking for a jitter.
    #[test]
    fn a_signal_variance_that_under_or_overflows_is_refused() {
        let x = array![[0.1, 0.2], [0.5, 0.9], [0.9, 0.4], [0.3, 0.6]];
        let y = array![0.0, 1.0, -1.0, 0.5];
        for ln_s2 in [-1.0e4, 1.0e4] {
            let h = Hyper::from_slice(&[ln_s2, 0.0, 0.0, (1e-6f64).ln()]);
            let r = Gp::fit(x.view(), y.view(), Kernel::Matern52, Trend::Linear, h);
            assert!(
                matches!(r, Err(SurrogateError::NotPositiveDefinite { .. })),
                "ln σ² = {ln_s2}"
            );
        }
    }
}
