use super::{Design, DesignPoint};
use crate::study::DesignMethod;
use anyhow::{bail, Context, Result};
use serde::{Deserialize, Serialize};
use serde_yaml::{Mapping, Value};

/// `design.yaml` body: `method`, `seed`, `parameters`, `points: [{id, <name>: value...}]`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DesignBody {
    pub method: DesignMethod,
    pub seed: u64,
    pub parameters: Vec<String>,
    pub points: Vec<Mapping>,
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
            parameters: d.names.clone(),
            points,
        }
    }
}

impl DesignBody {
    /// Back to a [`Design`].
    ///
    /// # Errors
    /// A point without an id or without a number for a parameter.
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
        Ok(Design {
            method: self.method,
            seed: self.seed,
            names: self.parameters.clone(),
            points,
        })
    }
}
