//! Designs of experiments: where in the parameter box to run the simulator.
//!
//! Input: the parameters (ranges and priors), the design settings and a seed; for
//! augmentation, an existing design.
//! Output: a [`Design`] (points with ids, in the parameters' units), with its rounds,
//! its quality in the unit box and warnings for the caller to show.
//! Must not: open files, print, or read the clock. Random streams come from
//! [`crate::rng::stream`] (round r of a design uses stream r of its seed); the
//! lower-level functions take an injected RNG.
//!
//! Methods: maximin Latin hypercube ([`maximin_latin_hypercube`]), scrambled Sobol'
//! points ([`SobolGenerator`]), independent uniform points ([`random_uniform`]).
//! Augmentation: [`augment`] (gap filling, or the continuation of a Sobol' sequence),
//! [`pick_spread`] (greedy maximin among given candidates). Quality: [`quality`].

mod augment;
mod error;
mod lhs;
pub mod params;
mod polish;
mod quality;
mod sobol;
#[rustfmt::skip]
mod sobol_table;
mod space;
mod staleness;
mod wire;

pub use augment::{fill_gaps, pick_spread};
pub use error::DesignError;
pub use lhs::{
    default_polish, default_proposals, latin_hypercube, maximin_latin_hypercube, random_uniform,
    MaximinParams, SearchReport,
};
pub use params::{DesignParams, SOBOL_MAX_DIM};
pub use quality::{
    centered_l2_discrepancy, max_abs_correlation, min_distance, phi_p, quality, Quality, PHI_P,
};
pub use sobol::{SobolGenerator, SOBOL_BITS, SOBOL_MAX_POINTS};
pub use space::{from_unit, to_unit};
pub use staleness::mismatch;
pub use wire::{DesignBody, RoundWire};

use crate::study::{DesignMethod, DesignSpace, Parameter};
use ndarray::{concatenate, Array2, Axis};

/// One design point.
#[derive(Debug, Clone, PartialEq)]
pub struct DesignPoint {
    /// `p0001`, `p0002`, ...
    pub id: String,
    /// One value per parameter, in the study's order and units.
    pub values: Vec<f64>,
}

/// How the points added in a later round were chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum Fill {
    /// Gap filling among random candidates ([`fill_gaps`]).
    #[serde(rename = "maximin")]
    Maximin,
    /// The next points of the design's own scrambled Sobol' sequence.
    #[serde(rename = "sobol-sequence")]
    SobolSequence,
    /// Given points: posterior draws and the posterior mean, for confirmation runs
    /// (`assay check`); `seed` and `stream` are those the draws were picked with.
    #[serde(rename = "posterior-draws")]
    PosteriorDraws,
    /// Refinement (`assay refine`): points picked among posterior draws, spread out
    /// from the design's points by greedy maximin ([`pick_spread`]).
    #[serde(rename = "posterior-spread")]
    PosteriorSpread,
}

/// One round of a design: the initial points, or points added later.
#[derive(Debug, Clone, PartialEq)]
pub enum Round {
    Initial {
        method: DesignMethod,
        n: usize,
        seed: u64,
        /// What the maximin search did (`lhs` only).
        search: Option<SearchReport>,
    },
    Added {
        n: usize,
        fill: Fill,
        seed: u64,
        /// Random stream of `seed` used (the round's number).
        stream: u64,
    },
}

impl Round {
    /// The same round with its point count mapped by `f` (parameter points ↔ points at
    /// every field condition).
    fn scaled(&self, f: impl Fn(usize) -> usize) -> Round {
        match *self {
            Round::Initial {
                method,
                n,
                seed,
                search,
            } => Round::Initial {
                method,
                n: f(n),
                seed,
                search,
            },
            Round::Added {
                n,
                fill,
                seed,
                stream,
            } => Round::Added {
                n: f(n),
                fill,
                seed,
                stream,
            },
        }
    }
}

/// A set of points over the parameter box.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    /// Method and seed of the first round.
    pub method: DesignMethod,
    pub seed: u64,
    pub space: DesignSpace,
    pub names: Vec<String>,
    pub points: Vec<DesignPoint>,
    /// Round 0 first; never empty for a design made here (a record without rounds reads
    /// as one initial round).
    pub rounds: Vec<Round>,
    /// Quality of all the points in the unit box; `None` in records that predate it.
    pub quality: Option<Quality>,
    /// Warnings about the design (also shown by the CLI).
    pub warnings: Vec<String>,
}

impl Design {
    /// Points of the first round (what `design.points` asked for).
    pub fn initial_size(&self) -> usize {
        match self.rounds.first() {
            Some(Round::Initial { n, .. }) => *n,
            _ => self.points.len(),
        }
    }

    /// The points in the unit box of the design's space ([`to_unit`]), one per row.
    ///
    /// # Panics
    /// If `params` does not have one entry per column.
    pub fn unit_points(&self, params: &[Parameter]) -> Array2<f64> {
        assert_eq!(params.len(), self.names.len(), "one parameter per column");
        Array2::from_shape_fn((self.points.len(), params.len()), |(i, j)| {
            to_unit(&params[j], self.space, self.points[i].values[j])
        })
    }
}

/// Id of the `i`-th point (0-based): `p` and at least four digits.
pub fn point_id(i: usize) -> String {
    format!("p{:04}", i + 1)
}

/// The design's variables must be `params`, by name and in order.
fn same_names(design: &Design, params: &[Parameter]) -> Result<(), DesignError> {
    let names: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
    if names != design.names {
        return Err(DesignError::ParametersDiffer {
            design: design.names.join(", "),
            study: names.join(", "),
        });
    }
    Ok(())
}

/// The 0-based index the next new point's id continues from: after the largest id
/// number in the design (or its point count when no id has a number).
fn next_id_index(design: &Design) -> usize {
    design
        .points
        .iter()
        .filter_map(|p| id_number(&p.id))
        .max()
        .unwrap_or(design.points.len())
}

/// The number in a point id made by [`point_id`] (`p0031` → 31).
fn id_number(id: &str) -> Option<usize> {
    id.strip_prefix('p')?.parse().ok()
}

fn to_points(
    params: &[Parameter],
    space: DesignSpace,
    unit: &Array2<f64>,
    first: usize,
) -> Vec<DesignPoint> {
    unit.rows()
        .into_iter()
        .enumerate()
        .map(|(i, u)| DesignPoint {
            id: point_id(first + i),
            values: params
                .iter()
                .zip(u.iter())
                .map(|(p, u)| from_unit(p, space, *u))
                .collect(),
        })
        .collect()
}

fn size_warnings(n: usize, d: usize) -> Vec<String> {
    let mut w = Vec::new();
    if n < d + 1 {
        w.push(format!(
            "{n} points for {d} parameters: fewer than parameters + 1, so the surrogate will be weak (10 × parameters is a common choice)"
        ));
    }
    w
}

fn sobol_balance_warning(n: usize) -> Option<String> {
    if n.is_power_of_two() {
        return None;
    }
    let below = 1usize << (usize::BITS - 1 - n.leading_zeros());
    Some(format!(
        "{n} Sobol' points: not a power of two, so the points lose the balance of a Sobol' net (use {below} or {})",
        below * 2
    ))
}

/// Build a design of `spec.points` points over the box of `params`, from random stream
/// 0 of `spec.seed`.
///
/// `lhs` is [`maximin_latin_hypercube`] at its default settings, `sobol` the first n
/// points of a [`SobolGenerator::scrambled`] sequence, `random` [`random_uniform`]; the
/// unit box maps to the parameters by [`from_unit`] in `spec.space`.
///
/// # Errors
/// No parameters, fewer than 2 points, or for `sobol` more parameters than
/// [`SOBOL_MAX_DIM`].
pub fn generate(params: &[Parameter], spec: &DesignParams) -> Result<Design, DesignError> {
    if let Some(conditions) = &spec.conditions {
        return generate_at_conditions(params, spec, conditions);
    }
    let (n, d) = (spec.points, params.len());
    if d == 0 {
        return Err(DesignError::NoParameters);
    }
    if n < 2 {
        return Err(DesignError::TooFewPoints { n });
    }
    let mut rng = crate::rng::stream(spec.seed, 0);
    let mut warnings = size_warnings(n, d);
    let mut search = None;
    let unit = match spec.method {
        DesignMethod::Lhs => {
            let (x, r) = maximin_latin_hypercube(n, d, &MaximinParams::new(n, d), &mut rng);
            search = Some(r);
            x
        }
        DesignMethod::Sobol => {
            warnings.extend(sobol_balance_warning(n));
            SobolGenerator::scrambled(d, &mut rng)?.points(0, n)?
        }
        DesignMethod::Random => random_uniform(n, d, &mut rng),
    };
    Ok(Design {
        method: spec.method,
        seed: spec.seed,
        space: spec.space,
        names: params.iter().map(|p| p.name.clone()).collect(),
        points: to_points(params, spec.space, &unit, 0),
        rounds: vec![Round::Initial {
            method: spec.method,
            n,
            seed: spec.seed,
            search,
        }],
        quality: Some(quality(unit.view())),
        warnings,
    })
}

/// A design over the parameters (the variables after the controls, `params` holding the
/// controls first), each point run at every one of the field `conditions`: the points
/// are (condition, parameter point) pairs, parameter point by parameter point. The
/// quality is that of the parameter points.
fn generate_at_conditions(
    params: &[Parameter],
    spec: &DesignParams,
    conditions: &[Vec<f64>],
) -> Result<Design, DesignError> {
    let n_c = conditions.first().map_or(0, Vec::len);
    let inner = DesignParams {
        conditions: None,
        ..spec.clone()
    };
    let base = generate(&params[n_c..], &inner)?;
    let mut points = Vec::with_capacity(base.points.len() * conditions.len());
    for p in &base.points {
        for c in conditions {
            points.push(DesignPoint {
                id: point_id(points.len()),
                values: c.iter().chain(&p.values).copied().collect(),
            });
        }
    }
    let m = conditions.len();
    Ok(Design {
        names: params.iter().map(|p| p.name.clone()).collect(),
        points,
        rounds: base.rounds.iter().map(|r| r.scaled(|k| k * m)).collect(),
        ..base
    })
}

/// Add `n_add` points to `design`, keeping its points (ids and values) as they are.
///
/// Round r (r = number of rounds so far) draws from random stream r of the design's
/// seed. A `sobol` design continues its own scrambled sequence (points n..n + n_add,
/// so that 2^m points in total are again a balanced net); the others fill gaps with
/// [`fill_gaps`] in the unit box of the design's space. New ids continue after the
/// largest existing one.
///
/// # Errors
/// `n_add` = 0; parameters whose names differ from the design's; an existing point
/// outside the current ranges; for `sobol`, more points than the sequence holds.
pub fn augment(design: &Design, params: &[Parameter], n_add: usize) -> Result<Design, DesignError> {
    if n_add == 0 {
        return Err(DesignError::NothingToAdd);
    }
    same_names(design, params)?;
    for pt in &design.points {
        for (v, p) in pt.values.iter().zip(params) {
            if !(p.lo..=p.hi).contains(v) {
                return Err(DesignError::OutsideRange {
                    id: pt.id.clone(),
                    name: p.name.clone(),
                    value: *v,
                    lo: p.lo,
                    hi: p.hi,
                });
            }
        }
    }
    let d = params.len();
    let stream = design.rounds.len().max(1) as u64;
    let old = design.unit_points(params);
    let mut warnings = Vec::new();
    let (unit, fill) = match design.method {
        DesignMethod::Sobol => {
            let mut rng0 = crate::rng::stream(design.seed, 0);
            let g = SobolGenerator::scrambled(d, &mut rng0)?;
            let total = design.points.len() + n_add;
            warnings.extend(sobol_balance_warning(total));
            (g.points(design.points.len(), n_add)?, Fill::SobolSequence)
        }
        DesignMethod::Lhs | DesignMethod::Random => {
            let mut rng = crate::rng::stream(design.seed, stream);
            (fill_gaps(old.view(), n_add, &mut rng), Fill::Maximin)
        }
    };
    let first = next_id_index(design);
    let mut out = design.clone();
    out.points
        .extend(to_points(params, design.space, &unit, first));
    ensure_initial_round(&mut out, design);
    out.rounds.push(Round::Added {
        n: n_add,
        fill,
        seed: design.seed,
        stream,
    });
    out.quality = Some(quality(concatenate![Axis(0), old, unit].view()));
    out.warnings = warnings;
    Ok(out)
}

/// Add `n_add` parameter points to a design made at field `conditions`
/// (`design.controls: from_data`, see [`generate`]), each run at every condition: the
/// parameter points are extended as [`augment`] extends a design over the parameters
/// alone (the same random stream and fill), then paired with the conditions.
///
/// # Errors
/// As [`augment`]; also a design whose points are not parameter points × `conditions`.
pub fn augment_at_conditions(
    design: &Design,
    vars: &[Parameter],
    conditions: &[Vec<f64>],
    n_add: usize,
) -> Result<Design, DesignError> {
    let n_c = conditions.first().map_or(0, Vec::len);
    let m = conditions.len().max(1);
    if design.points.len() % m != 0 {
        return Err(DesignError::ParametersDiffer {
            design: format!("{} points", design.points.len()),
            study: format!("a multiple of the {m} field conditions"),
        });
    }
    let params = &vars[n_c..];
    // The design over the parameters alone: every m-th point, its parameter part.
    let inner = Design {
        names: params.iter().map(|p| p.name.clone()).collect(),
        points: design
            .points
            .iter()
            .step_by(m)
            .map(|p| DesignPoint {
                id: p.id.clone(),
                values: p.values[n_c..].to_vec(),
            })
            .collect(),
        rounds: design.rounds.iter().map(|r| r.scaled(|k| k / m)).collect(),
        ..design.clone()
    };
    let grown = augment(&inner, params, n_add)?;
    let first = next_id_index(design);
    let mut out = design.clone();
    for p in &grown.points[inner.points.len()..] {
        for c in conditions {
            out.points.push(DesignPoint {
                id: point_id(first + out.points.len() - design.points.len()),
                values: c.iter().chain(&p.values).copied().collect(),
            });
        }
    }
    ensure_initial_round(&mut out, design);
    if let Some(Round::Added {
        fill, seed, stream, ..
    }) = grown.rounds.last().cloned()
    {
        out.rounds.push(Round::Added {
            n: n_add * m,
            fill,
            seed,
            stream,
        });
    }
    out.quality = grown.quality;
    out.warnings = grown.warnings;
    Ok(out)
}

/// Make sure `out` (a copy of `design` being extended) starts with its initial round:
/// a record without rounds reads as one initial round of all its points.
fn ensure_initial_round(out: &mut Design, design: &Design) {
    if out.rounds.is_empty() {
        out.rounds.push(Round::Initial {
            method: design.method,
            n: design.points.len(),
            seed: design.seed,
            search: None,
        });
    }
}

/// Append the given points (parameter values, in the design's parameter order) as a new
/// round with `fill`, ids continuing after the largest existing one. Points must lie in
/// the parameter box.
///
/// # Errors
/// Parameters that differ from the design's, no points, or a point outside the box.
pub fn append(
    design: &Design,
    params: &[Parameter],
    values: &[Vec<f64>],
    fill: Fill,
    seed: u64,
    stream: u64,
) -> Result<Design, DesignError> {
    if values.is_empty() {
        return Err(DesignError::NothingToAdd);
    }
    same_names(design, params)?;
    let first = next_id_index(design);
    let mut out = design.clone();
    for (k, v) in values.iter().enumerate() {
        for (x, p) in v.iter().zip(params) {
            if !(p.lo..=p.hi).contains(x) {
                return Err(DesignError::OutsideRange {
                    id: point_id(first + k),
                    name: p.name.clone(),
                    value: *x,
                    lo: p.lo,
                    hi: p.hi,
                });
            }
        }
        out.points.push(DesignPoint {
            id: point_id(first + k),
            values: v.clone(),
        });
    }
    ensure_initial_round(&mut out, design);
    out.rounds.push(Round::Added {
        n: values.len(),
        fill,
        seed,
        stream,
    });
    out.quality = Some(quality(out.unit_points(params).view()));
    out.warnings = Vec::new();
    Ok(out)
}

/// Add `n` of the candidate points `draws` (posterior draws, parameter values in the
/// design's order) as a new round with [`Fill::PosteriorSpread`]: greedy maximin in the
/// unit box of the design's space ([`pick_spread`]) picks each next draw as far as
/// possible from the design's points and the draws picked before it, so the new runs
/// cover the region where the posterior lives instead of piling up at its mode.
///
/// # Errors
/// `n` = 0 or more than the draws; parameters that differ from the design's; a draw
/// outside the box.
pub fn spread_among(
    design: &Design,
    params: &[Parameter],
    draws: &[Vec<f64>],
    n: usize,
    seed: u64,
    stream: u64,
) -> Result<Design, DesignError> {
    if n == 0 || n > draws.len() {
        return Err(DesignError::NothingToAdd);
    }
    same_names(design, params)?;
    let candidates = Array2::from_shape_fn((draws.len(), params.len()), |(i, j)| {
        to_unit(&params[j], design.space, draws[i][j])
    });
    let existing = design.unit_points(params);
    let mut rng = crate::rng::stream(seed, stream);
    let picked = pick_spread(candidates.view(), existing.view(), n, &mut rng);
    let values: Vec<Vec<f64>> = picked.iter().map(|&i| draws[i].clone()).collect();
    append(design, params, &values, Fill::PosteriorSpread, seed, stream)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::Prior;

    fn params(d: usize) -> Vec<Parameter> {
        (0..d)
            .map(|j| Parameter {
                name: format!("x{j}"),
                unit: None,
                lo: j as f64,
                hi: j as f64 + 2.0,
                prior: Prior::Uniform,
            })
            .collect()
    }

    fn spec(method: DesignMethod, points: usize) -> DesignParams {
        DesignParams {
            method,
            points,
            seed: 9,
            space: DesignSpace::Range,
            conditions: None,
        }
    }

    #[test]
    fn augmenting_keeps_points_and_continues_ids() {
        for method in [DesignMethod::Lhs, DesignMethod::Sobol, DesignMethod::Random] {
            let p = params(3);
            let d0 = generate(&p, &spec(method, 30)).unwrap();
            let d1 = augment(&d0, &p, 5).unwrap();
            assert_eq!(&d1.points[..30], &d0.points[..]);
            let ids: Vec<&str> = d1.points[30..].iter().map(|x| x.id.as_str()).collect();
            assert_eq!(ids, ["p0031", "p0032", "p0033", "p0034", "p0035"]);
            assert_eq!(d1.rounds.len(), 2);
            assert_eq!(d1.initial_size(), 30);
            let d2 = augment(&d1, &p, 2).unwrap();
            assert!(matches!(
                d2.rounds[2],
                Round::Added {
                    n: 2,
                    stream: 2,
                    ..
                }
            ));
            assert_eq!(d2.points.last().unwrap().id, "p0037");
        }
    }

    #[test]
    fn spreading_among_draws_picks_distinct_draws_away_from_the_design() {
        use rand::Rng;
        let p = params(2);
        let d0 = generate(&p, &spec(DesignMethod::Lhs, 10)).unwrap();
        // A cloud of 200 draws in the corner [0, 0.2] x [1, 1.2] of the box [0,2]x[1,3].
        let mut rng = crate::rng::stream(3, 0);
        let draws: Vec<Vec<f64>> = (0..200)
            .map(|_| vec![rng.gen_range(0.0..0.2), rng.gen_range(1.0..1.2)])
            .collect();
        let d1 = spread_among(&d0, &p, &draws, 6, 9, 1).unwrap();
        assert_eq!(d1.points.len(), 16);
        assert!(matches!(
            d1.rounds[1],
            Round::Added {
                n: 6,
                fill: Fill::PosteriorSpread,
                ..
            }
        ));
        let new: Vec<&Vec<f64>> = d1.points[10..].iter().map(|q| &q.values).collect();
        for v in &new {
            assert!(draws.contains(v), "{v:?} is not one of the draws");
        }
        let mut sorted = new.clone();
        sorted.dedup();
        assert_eq!(sorted.len(), 6);
        // Greedy maximin: the picks are spread over the cloud, not bunched — their
        // smallest pairwise distance exceeds the cloud's typical nearest-neighbour
        // spacing (0.2 / sqrt(200) ≈ 0.014) many times over.
        let mut dmin = f64::INFINITY;
        for i in 0..6 {
            for j in 0..i {
                let d2: f64 = (0..2).map(|k| (new[i][k] - new[j][k]).powi(2)).sum();
                dmin = dmin.min(d2.sqrt());
            }
        }
        assert!(dmin > 0.05, "picks bunched: min distance {dmin}");
        assert_eq!(
            spread_among(&d0, &p, &draws, 0, 9, 1).unwrap_err(),
            DesignError::NothingToAdd
        );
    }

    #[test]
    fn a_continued_sobol_design_equals_one_made_at_once() {
        let p = params(4);
        let d0 = generate(&p, &spec(DesignMethod::Sobol, 16)).unwrap();
        let d1 = augment(&d0, &p, 16).unwrap();
        let whole = generate(&p, &spec(DesignMethod::Sobol, 32)).unwrap();
        assert_eq!(d1.points, whole.points);
        assert!(d1.warnings.is_empty());
    }

    #[test]
    fn warnings_for_few_points_and_unbalanced_sobol() {
        let p = params(4);
        let d = generate(&p, &spec(DesignMethod::Sobol, 3)).unwrap();
        assert_eq!(d.warnings.len(), 2, "{:?}", d.warnings);
        assert!(d.warnings[0].starts_with("3 points for 4 parameters"));
        assert!(
            d.warnings[1].contains("not a power of two"),
            "{:?}",
            d.warnings
        );
        assert!(d.warnings[1].contains("use 2 or 4"), "{:?}", d.warnings);
    }

    #[test]
    fn errors_one_per_invariant() {
        let p = params(2);
        assert_eq!(
            generate(&p, &spec(DesignMethod::Lhs, 1)).unwrap_err(),
            DesignError::TooFewPoints { n: 1 }
        );
        assert_eq!(
            generate(&params(SOBOL_MAX_DIM + 1), &spec(DesignMethod::Sobol, 8)).unwrap_err(),
            DesignError::TooManyDimensions {
                d: SOBOL_MAX_DIM + 1,
                max: SOBOL_MAX_DIM
            }
        );
        let d = generate(&p, &spec(DesignMethod::Lhs, 5)).unwrap();
        assert_eq!(augment(&d, &p, 0).unwrap_err(), DesignError::NothingToAdd);
        let mut renamed = p.clone();
        renamed[1].name = "y".into();
        assert_eq!(
            augment(&d, &renamed, 1).unwrap_err().to_string(),
            "the design's parameters (x0, x1) differ from the study's (x0, y)"
        );
        let mut narrowed = p.clone();
        narrowed[0].hi = 0.001;
        assert!(matches!(
            augment(&d, &narrowed, 1).unwrap_err(),
            DesignError::OutsideRange { .. }
        ));
    }
}
