//! Designs against scipy: the squared centered L2 discrepancy (Hickernell 1998) and the
//! unscrambled Sobol' sequence with the Joe & Kuo (2008) direction numbers. Fixtures
//! `tests/reference/discrepancy.json` and `tests/reference/sobol.json`, made by
//! `tests/reference/design_reference.py` (versions recorded in each fixture); the
//! direction-number table `src/design/sobol_table.rs` is made by
//! `tests/reference/sobol_directions.py` from the same scipy.

use assay::design::{centered_l2_discrepancy, SobolGenerator, SOBOL_BITS, SOBOL_MAX_DIM};
use ndarray::Array2;
use serde::Deserialize;

/// Same formula, same double-precision points; only the order of the O(n²) sums
/// differs from scipy's. CD² is a difference of three terms of size about (13/12)^d,
/// so rounding is absolute on that scale: about n ε (13/12)^d ≈ 1e-13 for 200
/// points. The smallest value in the fixture is about 1e-3.
const CD_ATOL_PER_SCALE: f64 = 1e-12;

fn fixture(name: &str) -> String {
    let path = format!("{}/tests/reference/{name}", env!("CARGO_MANIFEST_DIR"));
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("cannot read {path}: {e}"))
}

#[derive(Deserialize)]
struct CdCase {
    name: String,
    points: Vec<Vec<f64>>,
    cd2: f64,
}

#[derive(Deserialize)]
struct CdFixture {
    cases: Vec<CdCase>,
}

fn matrix(rows: &[Vec<f64>]) -> Array2<f64> {
    let d = rows[0].len();
    Array2::from_shape_vec((rows.len(), d), rows.concat()).expect("rectangular")
}

#[test]
fn centered_l2_discrepancy_matches_scipy() {
    let f: CdFixture = serde_json::from_str(&fixture("discrepancy.json")).unwrap();
    assert_eq!(f.cases.len(), 7);
    for c in &f.cases {
        let x = matrix(&c.points);
        let got = centered_l2_discrepancy(x.view());
        let scale = (13.0f64 / 12.0).powi(x.ncols() as i32);
        assert!(
            (got - c.cd2).abs() <= CD_ATOL_PER_SCALE * scale,
            "{}: {got} vs scipy {}",
            c.name,
            c.cd2
        );
    }
}

#[derive(Deserialize)]
struct SobolFixture {
    dims: usize,
    n: usize,
    denominator: u64,
    numerators: Vec<Vec<u64>>,
}

#[test]
fn unscrambled_sobol_equals_scipy_first_1024_points_in_10_dimensions() {
    let f: SobolFixture = serde_json::from_str(&fixture("sobol.json")).unwrap();
    assert_eq!((f.dims, f.n), (10, 1024));
    assert_eq!(f.denominator, 1u64 << SOBOL_BITS);
    let x = SobolGenerator::new(f.dims).unwrap().points(0, f.n).unwrap();
    for (i, row) in f.numerators.iter().enumerate() {
        for (j, k) in row.iter().enumerate() {
            // Exact: both are k / 2^30 in binary floating point.
            assert_eq!(
                x[[i, j]],
                *k as f64 / f.denominator as f64,
                "point {i}, dimension {j}"
            );
        }
    }
    // scipy skips nothing: the first point is the origin.
    assert!(x.row(0).iter().all(|v| *v == 0.0));
}

#[test]
fn the_table_holds_at_least_21_dimensions_and_every_one_is_a_01_sequence() {
    // Each one-dimensional projection of a Sobol' sequence is a (0, 1)-sequence in base
    // 2: the first 2^m points put one point in each interval [k/2^m, (k+1)/2^m) (Sobol'
    // 1967; Joe & Kuo 2008, §2; section number from memory). A typo in a direction number
    // breaks this.
    const { assert!(SOBOL_MAX_DIM >= 21) };
    let m = 10;
    let x = SobolGenerator::new(SOBOL_MAX_DIM)
        .unwrap()
        .points(0, 1 << m)
        .unwrap();
    for j in 0..SOBOL_MAX_DIM {
        let mut cells: Vec<usize> = x.column(j).iter().map(|v| (v * 1024.0) as usize).collect();
        cells.sort_unstable();
        assert_eq!(cells, (0..1024).collect::<Vec<_>>(), "dimension {j}");
    }
}
