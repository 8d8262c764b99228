//! Sobol' points in base 2 with the Joe & Kuo (2008) direction numbers, optionally
//! scrambled by a random linear matrix and a digital shift.

use super::error::DesignError;
use super::params::SOBOL_MAX_DIM;
use super::sobol_table::{M_INIT, POLY};
use ndarray::Array2;
use rand::Rng;

// The study checks Sobol' designs against `params::SOBOL_MAX_DIM`; the generated table
// must hold exactly that many dimensions (regenerate it, or change the constant).
const _: () = assert!(super::sobol_table::SOBOL_MAX_DIM == SOBOL_MAX_DIM);

/// Bits of each coordinate: points are k / 2^30, as in scipy's default, so the
/// unscrambled sequence can be compared with scipy's exactly.
pub const SOBOL_BITS: u32 = 30;

/// Largest number of points the sequence holds at [`SOBOL_BITS`] bits.
pub const SOBOL_MAX_POINTS: usize = 1 << SOBOL_BITS;

/// The generator matrices of one Sobol' point set: `v[j][b]` is the b-th direction
/// number of dimension j, already shifted to [`SOBOL_BITS`] bits, and `shift[j]` the
/// digital shift (0 when unscrambled).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SobolGenerator {
    v: Vec<[u32; SOBOL_BITS as usize]>,
    shift: Vec<u32>,
}

impl SobolGenerator {
    /// The unscrambled sequence in `d` dimensions.
    ///
    /// # Formula
    /// Dimension j has a primitive polynomial x^s + a_1 x^(s−1) + … + a_(s−1) x + 1 and
    /// initial integers m_1..m_s; further ones follow
    /// m_k = 2a_1 m_(k−1) ⊕ 4a_2 m_(k−2) ⊕ … ⊕ 2^s m_(k−s) ⊕ m_(k−s) (Bratley & Fox
    /// 1988), and v_k = m_k / 2^k. Dimension 0 has m_k = 1 (van der Corput).
    ///
    /// # Errors
    /// `d` = 0 or more than [`SOBOL_MAX_DIM`] dimensions.
    ///
    /// # References
    /// Joe, S. & Kuo, F. Y. (2008). Constructing Sobol sequences with better
    /// two-dimensional projections. SIAM J. Sci. Comput. 30(5), 2635–2654.
    /// Bratley, P. & Fox, B. L. (1988). Algorithm 659: Implementing Sobol's quasirandom
    /// sequence generator. ACM Trans. Math. Softw. 14(1), 88–100.
    pub fn new(d: usize) -> Result<Self, DesignError> {
        if d == 0 {
            return Err(DesignError::NoParameters);
        }
        if d > SOBOL_MAX_DIM {
            return Err(DesignError::TooManyDimensions {
                d,
                max: SOBOL_MAX_DIM,
            });
        }
        let bits = SOBOL_BITS as usize;
        let v = (0..d)
            .map(|j| {
                let mut m = [0u32; SOBOL_BITS as usize];
                if j == 0 {
                    m = [1; SOBOL_BITS as usize];
                } else {
                    let poly = POLY[j];
                    let s = (31 - poly.leading_zeros()) as usize;
                    let init = M_INIT[j];
                    debug_assert_eq!(init.len(), s);
                    m[..s].copy_from_slice(init);
                    for k in s..bits {
                        let mut new = m[k - s] ^ (m[k - s] << s);
                        for i in 1..s {
                            // a_i is bit (s − i) of the polynomial.
                            if (poly >> (s - i)) & 1 == 1 {
                                new ^= m[k - i] << i;
                            }
                        }
                        m[k] = new;
                    }
                }
                let mut col = [0u32; SOBOL_BITS as usize];
                for (b, c) in col.iter_mut().enumerate() {
                    *c = m[b] << (bits - 1 - b);
                }
                col
            })
            .collect();
        Ok(Self {
            v,
            shift: vec![0; d],
        })
    }

    /// The sequence scrambled by linear matrix scrambling and a digital shift.
    ///
    /// # Formula
    /// Each dimension's generator matrix C_j is replaced by L_j C_j and each point by
    /// y = L_j C_j i ⊕ e_j, with L_j a random lower-triangular binary matrix with unit
    /// diagonal (output digit r depends on input digits 1..r) and e_j a random digit
    /// vector. Both preserve the (t, m, s)-net structure, so 2^m points keep their
    /// balance, and every point is uniform on the unit box.
    ///
    /// # Errors
    /// As [`SobolGenerator::new`].
    ///
    /// # References
    /// Matoušek, J. (1998). On the L2-discrepancy for anchored boxes. Journal of
    /// Complexity 14(4), 527–556 (linear matrix scrambling).
    /// Owen, A. B. (1998). Scrambling Sobol' and Niederreiter–Xing points. Journal of
    /// Complexity 14(4), 466–489.
    pub fn scrambled<R: Rng + ?Sized>(d: usize, rng: &mut R) -> Result<Self, DesignError> {
        let mut g = Self::new(d)?;
        let bits = SOBOL_BITS;
        let all = (1u32 << bits) - 1;
        for j in 0..d {
            // Row r (digit r + 1, most significant first) of L_j as a mask over the input bits:
            // its own bit, plus random bits among the more significant ones.
            let masks: Vec<u32> = (0..bits)
                .map(|r| {
                    let own = 1u32 << (bits - 1 - r);
                    let higher = all & !((own << 1) - 1);
                    own | (rng.gen::<u32>() & higher)
                })
                .collect();
            for c in g.v[j].iter_mut() {
                let mut out = 0u32;
                for (r, mask) in masks.iter().enumerate() {
                    if (mask & *c).count_ones() & 1 == 1 {
                        out |= 1 << (bits - 1 - r as u32);
                    }
                }
                *c = out;
            }
            g.shift[j] = rng.gen::<u32>() & all;
        }
        Ok(g)
    }

    /// Dimensions of the points.
    pub fn dim(&self) -> usize {
        self.v.len()
    }

    /// Points `start..start + n` of the sequence (in Gray-code order), one per row.
    ///
    /// # Errors
    /// More points than the sequence holds ([`SOBOL_MAX_POINTS`]).
    pub fn points(&self, start: usize, n: usize) -> Result<Array2<f64>, DesignError> {
        let end = start
            .checked_add(n)
            .filter(|e| *e <= SOBOL_MAX_POINTS)
            .ok_or(DesignError::TooManyPoints {
                n: start.saturating_add(n),
                max: SOBOL_MAX_POINTS,
            })?;
        let d = self.dim();
        let scale = 1.0 / f64::from(1u32 << SOBOL_BITS);
        // Point i in Gray-code order is ⊕ of the direction numbers of the set bits of
        // gray(i) = i ⊕ (i >> 1); successive points differ by one direction number.
        let gray = start ^ (start >> 1);
        let mut cur: Vec<u32> = (0..d)
            .map(|j| {
                let mut x = self.shift[j];
                for b in 0..SOBOL_BITS as usize {
                    if (gray >> b) & 1 == 1 {
                        x ^= self.v[j][b];
                    }
                }
                x
            })
            .collect();
        let mut out = Array2::zeros((n, d));
        for (row, i) in (start..end).enumerate() {
            if row > 0 {
                let c = i.trailing_zeros() as usize;
                for (j, x) in cur.iter_mut().enumerate() {
                    *x ^= self.v[j][c];
                }
            }
            for (j, x) in cur.iter().enumerate() {
                out[[row, j]] = f64::from(*x) * scale;
            }
        }
        Ok(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn first_points_are_the_known_binary_fractions() {
        // The first four points of the unscrambled sequence in 2 dimensions
        // (Bratley & Fox 1988; also scipy's Sobol(2, scramble=False)).
        let x = SobolGenerator::new(2).unwrap().points(0, 4).unwrap();
        let want = [[0.0, 0.0], [0.5, 0.5], [0.75, 0.25], [0.25, 0.75]];
        for (i, w) in want.iter().enumerate() {
            assert_eq!([x[[i, 0]], x[[i, 1]]], *w);
        }
    }

    #[test]
    fn continuing_equals_generating_at_once() {
        let mut rng = crate::rng::stream(3, 0);
        let g = SobolGenerator::scrambled(5, &mut rng).unwrap();
        let all = g.points(0, 100).unwrap();
        let tail = g.points(37, 63).unwrap();
        assert_eq!(all.slice(ndarray::s![37.., ..]), tail);
    }

    #[test]
    fn too_many_dimensions_is_an_error() {
        assert_eq!(
            SobolGenerator::new(SOBOL_MAX_DIM + 1).unwrap_err(),
            DesignError::TooManyDimensions {
                d: SOBOL_MAX_DIM + 1,
                max: SOBOL_MAX_DIM
            }
        );
    }
}
