//! Structural properties of the designs, over many seeds: the maximin Latin hypercube
//! beats plain random ones on the minimum distance (Morris & Mitchell 1995), augmented
//! designs keep their points and fill gaps better than random points (measured by the
//! centered L2 discrepancy, Hickernell 1998), scrambled Sobol' points stay balanced
//! (Owen 1998; Matoušek 1998), and `space: prior` follows the prior.

use assay::design::{
    augment, centered_l2_discrepancy, generate, latin_hypercube, maximin_latin_hypercube,
    min_distance, point_id, random_uniform, Design, DesignPoint, MaximinParams, Round,
    SobolGenerator,
};
use assay::study::{DesignMethod, DesignParams, DesignSpace, Parameter, Prior};
use ndarray::{concatenate, Array2, Axis};

/// Seeds per comparison (our acceptance rule: 50).
const SEEDS: u64 = 50;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    }
}

fn unit_params(d: usize) -> Vec<Parameter> {
    (0..d)
        .map(|j| Parameter {
            name: format!("x{j}"),
            unit: None,
            lo: 0.0,
            hi: 1.0,
            prior: Prior::Uniform,
        })
        .collect()
}

/// The first round of a design. For `lhs` a plain Latin hypercube stands in for the
/// maximin one (what is tested is the augmentation; the full search on 250 designs
/// would only slow the test down).
fn initial(method: DesignMethod, params: &[Parameter], n: usize, seed: u64) -> Design {
    let spec = DesignParams {
        method,
        points: n,
        seed,
        space: DesignSpace::Range,
        conditions: None,
    };
    if method != DesignMethod::Lhs {
        return generate(params, &spec).unwrap();
    }
    let x = latin_hypercube(n, params.len(), &mut assay::rng::stream(seed, 0));
    Design {
        method,
        seed,
        space: DesignSpace::Range,
        names: params.iter().map(|p| p.name.clone()).collect(),
        points: (0..n)
            .map(|i| DesignPoint {
                id: point_id(i),
                values: x.row(i).to_vec(),
            })
            .collect(),
        rounds: vec![Round::Initial {
            method,
            n,
            seed,
            search: None,
        }],
        quality: None,
        warnings: Vec::new(),
    }
}

fn values(d: &Design) -> Array2<f64> {
    let k = d.names.len();
    Array2::from_shape_vec(
        (d.points.len(), k),
        d.points.iter().flat_map(|p| p.values.clone()).collect(),
    )
    .unwrap()
}

#[test]
fn maximin_beats_random_latin_hypercubes_on_the_median_minimum_distance() {
    use rayon::prelude::*;
    for (n, d) in [(20, 3), (30, 4)] {
        // (random, maximin) minimum distances, one pair per seed, at the default settings.
        let pairs: Vec<(f64, f64)> = (0..SEEDS)
            .into_par_iter()
            .map(|seed| {
                let x = latin_hypercube(n, d, &mut assay::rng::stream(seed, 0));
                let (y, _) = maximin_latin_hypercube(
                    n,
                    d,
                    &MaximinParams::new(n, d),
                    &mut assay::rng::stream(seed, 0),
                );
                (min_distance(x.view()), min_distance(y.view()))
            })
            .collect();
        let plain: Vec<f64> = pairs.iter().map(|p| p.0).collect();
        let maximin: Vec<f64> = pairs.iter().map(|p| p.1).collect();
        let (a, b) = (median(plain), median(maximin.clone()));
        assert!(
            b > a,
            "{n} x {d}: median min distance {b} (maximin) vs {a} (random)"
        );
        // Not only the median: the worst maximin design beats the median random one.
        let worst = maximin.iter().cloned().fold(f64::INFINITY, f64::min);
        assert!(
            worst > a,
            "{n} x {d}: worst maximin {worst} vs median random {a}"
        );
    }
}

#[test]
fn augmented_designs_keep_their_points_and_fill_gaps_better_than_random_points() {
    for (method, d, n0, add) in [
        (DesignMethod::Lhs, 2, 12, 6),
        (DesignMethod::Lhs, 5, 30, 15),
        (DesignMethod::Lhs, 8, 40, 20),
        (DesignMethod::Random, 4, 20, 10),
        (DesignMethod::Sobol, 5, 16, 16),
    ] {
        let params = unit_params(d);
        let mut filled = Vec::new();
        let mut random = Vec::new();
        for seed in 0..SEEDS {
            let d0 = initial(method, &params, n0, seed);
            let d1 = augment(&d0, &params, add).unwrap();
            // Bit for bit: ids and values of the old points are unchanged.
            assert_eq!(&d1.points[..n0], &d0.points[..]);
            assert_eq!(d1.points.len(), n0 + add);
            filled.push(centered_l2_discrepancy(values(&d1).view()));
            let extra = random_uniform(add, d, &mut assay::rng::stream(seed, 99));
            random.push(centered_l2_discrepancy(
                concatenate![Axis(0), values(&d0), extra].view(),
            ));
        }
        let (a, b) = (median(filled), median(random));
        assert!(
            a <= b,
            "{method:?} {d} dims, {n0} + {add}: median CD² {a} (filled) vs {b} (random points)"
        );
    }
}

#[test]
fn scrambled_sobol_points_are_balanced_in_every_coordinate() {
    // A scrambled (t, m, s)-net in base 2 is still one (Owen 1998; Matoušek 1998), and
    // every coordinate of the first 2^m Sobol' points is a (0, m, 1)-net: each of the
    // 2^k equal intervals holds exactly 2^(m − k) points, for every k ≤ m.
    let m = 7;
    let n = 1usize << m;
    for seed in 0..SEEDS {
        let g = SobolGenerator::scrambled(12, &mut assay::rng::stream(seed, 0)).unwrap();
        let x = g.points(0, n).unwrap();
        for j in 0..12 {
            for k in 0..=m {
                let cells = 1usize << k;
                let mut count = vec![0usize; cells];
                for v in x.column(j) {
                    assert!((0.0..1.0).contains(v));
                    count[(v * cells as f64) as usize] += 1;
                }
                assert!(
                    count.iter().all(|c| *c == n / cells),
                    "seed {seed}, dimension {j}, 2^{k} intervals: {count:?}"
                );
            }
        }
        // Scrambling moves the origin away (no point at a corner of the box).
        assert!(x.row(0).iter().any(|v| *v != 0.0));
    }
}

#[test]
fn prior_space_puts_the_prior_share_of_points_in_an_interval() {
    // E ~ N(200, 15) truncated to [150, 250]. A Latin hypercube in the unit box puts
    // one point in each 1/n stratum of the truncated prior's probability, so the count
    // inside mean ± sd is within 1 of n P, P = (Φ(1) − Φ(−1)) / (Φ(z_hi) − Φ(z_lo)).
    // Φ values: standard normal table, common practice (Φ(1) = 0.841344746,
    // Φ(10/3) = 0.999570940).
    let p = Parameter {
        name: "E".into(),
        unit: None,
        lo: 150.0,
        hi: 250.0,
        prior: Prior::Normal {
            mean: 200.0,
            sd: 15.0,
        },
    };
    let n = 200;
    let share = (2.0 * 0.841_344_746 - 1.0) / (2.0 * 0.999_570_940 - 1.0);
    let spec = DesignParams {
        method: DesignMethod::Lhs,
        points: n,
        seed: 5,
        space: DesignSpace::Prior,
        conditions: None,
    };
    let d = generate(std::slice::from_ref(&p), &spec).unwrap();
    let inside = d
        .points
        .iter()
        .filter(|q| (185.0..=215.0).contains(&q.values[0]))
        .count() as f64;
    assert!(
        (inside - n as f64 * share).abs() <= 1.0,
        "{inside} of {n} inside mean ± sd, expected {}",
        n as f64 * share
    );
    assert!(d
        .points
        .iter()
        .all(|q| (150.0..=250.0).contains(&q.values[0])));
    // The same design over the range puts 30 % there.
    let spec = DesignParams {
        space: DesignSpace::Range,
        ..spec
    };
    let r = generate(&[p], &spec).unwrap();
    let inside = r
        .points
        .iter()
        .filter(|q| (185.0..=215.0).contains(&q.values[0]))
        .count() as f64;
    assert!((inside - 0.3 * n as f64).abs() <= 1.0, "{inside}");
}
