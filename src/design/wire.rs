use super::{Design, DesignPoint, Fill, Quality, Round, SearchReport};
use crate::study::{DesignMethod, DesignSpace};
use anyhow::{bail, Context, Result};
use serde::{Deserialize, Serialize};
use serde_yaml::{Mapping, Value};

/// `design.yaml` body: `method`, `seed`, `space`, `parameters`, `rounds`, `quality`,
/// `warnings`, `points: [{id, <name>: value...}]`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DesignBody {
    pub method: DesignMethod,
    pub seed: u64,
    /// Absent in records that predate it: `range`.
    #[serde(default)]
    pub space: DesignSpace,
    pub parameters: Vec<String>,
    /// Absent in records that predate it: one initial round of all the points.
    #[serde(default)]
    pub rounds: Vec<RoundWire>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub quality: Option<Quality>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
    pub points: Vec<Mapping>,
}

/// One entry of `rounds`: round 0 `{round, method, n, seed, search?}`, later rounds
/// `{round, added, fill, seed, stream}`.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct RoundWire {
    pub round: usize,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub method: Option<DesignMethod>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub n: Option<usize>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub added: Option<usize>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fill: Option<Fill>,
    pub seed: u64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stream: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub search: Option<SearchReport>,
}

impl From<(usize, &Round)> for RoundWire {
    fn from((i, r): (usize, &Round)) -> Self {
        let mut w = RoundWire {
            round: i,
            method: None,
            n: None,
            added: None,
            fill: None,
            seed: 0,
            stream: None,
            search: None,
        };
        match r {
            Round::Initial {
                method,
                n,
                seed,
                search,
            } => {
                w.method = Some(*method);
                w.n = Some(*n);
                w.seed = *seed;
                w.search = *search;
            }
            Round::Added {
                n,
                fill,
                seed,
                stream,
            } => {
                w.added = Some(*n);
                w.fill = Some(*fill);
                w.seed = *seed;
                w.stream = Some(*stream);
            }
        }
        w
    }
}

impl RoundWire {
    fn to_round(&self) -> Result<Round> {
        match (self.method, self.n, self.added, self.fill, self.stream) {
            (Some(method), Some(n), None, None, None) => Ok(Round::Initial {
                method,
                n,
                seed: self.seed,
                search: self.search,
            }),
            (None, None, Some(n), Some(fill), Some(stream)) if self.search.is_none() => {
                Ok(Round::Added {
                    n,
                    fill,
                    seed: self.seed,
                    stream,
                })
            }
            _ => bail!(
                "rounds[{}] is neither an initial round {{round, method, n, seed}} nor an added one {{round, added, fill, seed, stream}}",
                self.round
            ),
        }
    }
}

impl From<&Design> for DesignBody {
    fn from(d: &Design) -> Self {
        let points = d
            .points
            .iter()
            .map(|p| {
                let mut m = Mapping::new();
                m.insert("id".into(), Value::String(p.id.clone()));
                for (n, v) in d.names.iter().zip(&p.values) {
                    m.insert(Value::String(n.clone()), Value::from(*v));
                }
                m
            })
            .collect();
        Self {
            method: d.method,
            seed: d.seed,
            space: d.space,
            parameters: d.names.clone(),
            rounds: d.rounds.iter().enumerate().map(RoundWire::from).collect(),
            quality: d.quality,
            warnings: d.warnings.clone(),
            points,
        }
    }
}

impl DesignBody {
    /// Back to a [`Design`].
    ///
    /// # Errors
    /// A point without an id or without a number for a parameter; a malformed round or
    /// rounds whose sizes do not add up to the points.
    pub fn to_design(&self) -> Result<Design> {
        let mut points = Vec::new();
        for (i, m) in self.points.iter().enumerate() {
            let id = m
                .get("id")
                .and_then(Value::as_str)
                .with_context(|| format!("points[{i}] has no id"))?
                .to_string();
            let mut values = Vec::new();
            for n in &self.parameters {
                match m.get(n.as_str()).and_then(Value::as_f64) {
                    Some(v) => values.push(v),
                    None => bail!("points[{i}] ({id}) has no number for `{n}`"),
                }
            }
            points.push(DesignPoint { id, values });
        }
        let rounds = if self.rounds.is_empty() {
            vec![Round::Initial {
                method: self.method,
                n: points.len(),
                seed: self.seed,
                search: None,
            }]
        } else {
            let r = self
                .rounds
                .iter()
                .map(RoundWire::to_round)
                .collect::<Result<Vec<_>>>()?;
            if !matches!(r.first(), Some(Round::Initial { .. }))
                || r.iter().skip(1).any(|x| matches!(x, Round::Initial { .. }))
            {
                bail!("rounds: the first round, and only the first, must be the initial one");
            }
            let total: usize = r
                .iter()
                .map(|x| match x {
                    Round::Initial { n, .. } | Round::Added { n, .. } => *n,
                })
                .sum();
            if total != points.len() {
                bail!(
                    "rounds account for {total} points but the design has {}",
                    points.len()
                );
            }
            r
        };
        Ok(Design {
            method: self.method,
            seed: self.seed,
            space: self.space,
            names: self.parameters.clone(),
            points,
            rounds,
            quality: self.quality,
            warnings: self.warnings.clone(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::{DesignParams, Parameter, Prior};

    #[test]
    fn design_round_trips_through_yaml() {
        let params: Vec<Parameter> = ["a", "b"]
            .iter()
            .map(|n| Parameter {
                name: n.to_string(),
                unit: None,
                lo: -1.0,
                hi: 3.0,
                prior: Prior::Uniform,
            })
            .collect();
        let spec = DesignParams {
            method: DesignMethod::Lhs,
            points: 12,
            seed: 4,
            space: DesignSpace::Range,
            conditions: None,
        };
        let d = super::super::generate(&params, &spec).unwrap();
        let d = super::super::augment(&d, &params, 3).unwrap();
        let text = serde_yaml::to_string(&DesignBody::from(&d)).unwrap();
        let back: DesignBody = serde_yaml::from_str(&text).unwrap();
        assert_eq!(back.to_design().unwrap(), d);
    }
}
