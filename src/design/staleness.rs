//! Design staleness: whether a design on disk is still the one the study asks for.
//!
//! Input: the checked study and an existing [`Design`]. Output: why it no longer fits,
//! or nothing. Must not: open files (the workflow layer reads `design.yaml`).

use super::Design;
use crate::study::Study;

/// Why an existing design does not fit the study, if it does not.
pub fn mismatch(study: &Study, existing: &Design) -> Option<String> {
    let s = &study.design;
    let names = study.design_variable_names();
    if existing.names != names {
        let what = if study.controls.is_empty() {
            "parameters"
        } else {
            "controls and parameters"
        };
        return Some(format!(
            "its {what} {:?} differ from the study's {:?}",
            existing.names, names
        ));
    }
    // Points added later (`assay design --add`) do not count: the first round is what
    // `design.points` asked for (times the field conditions with `controls: from_data`).
    let n0 = existing.initial_size();
    let asked = s.points * s.conditions.as_ref().map_or(1, Vec::len);
    if existing.method != s.method
        || existing.seed != s.seed
        || n0 != asked
        || existing.space != s.space
    {
        return Some(format!(
            "it was made with method {:?}, seed {}, {} points, space {:?}; the study asks for {:?}, seed {}, {} points, space {:?}",
            existing.method, existing.seed, n0, existing.space, s.method, s.seed, asked, s.space
        ));
    }
    let vars = study.design_variables();
    for p in &existing.points {
        for (v, par) in p.values.iter().zip(&vars) {
            if *v < par.lo || *v > par.hi {
                return Some(format!(
                    "point {} has {} = {v} outside the range [{}, {}]",
                    p.id, par.name, par.lo, par.hi
                ));
            }
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    fn study(parameters: &str, design: &str) -> Study {
        let text = format!(
            "name: t\nparameters:\n{parameters}simulator:\n  command: [sim]\n  output: {{file: o.csv, x: x, y: [y]}}\nexperiments:\n  - {{name: e, data: d.csv, noise: {{sd: 0.1}}}}\ndesign: {design}\n"
        );
        crate::study::parse_with_data(&text, "x,y\n0,1.5\n1,2.0\n")
    }

    const AB: &str = "  - {name: a, range: [0, 5]}\n  - {name: b, range: [1, 2]}\n";
    const LHS: &str = "{method: lhs, points: 6, seed: 3}";

    fn design_of(s: &Study) -> Design {
        crate::design::generate(&s.design_variables(), &s.design).unwrap()
    }

    #[test]
    fn a_design_made_from_the_same_settings_fits() {
        let s = study(AB, LHS);
        assert_eq!(mismatch(&s, &design_of(&s)), None);
    }

    #[test]
    fn changed_settings_names_or_ranges_are_each_reported() {
        let s = study(AB, LHS);
        let d = design_of(&s);
        let seed = study(AB, "{method: lhs, points: 6, seed: 4}");
        let why = mismatch(&seed, &d).unwrap();
        assert!(why.contains("seed 3") && why.contains("seed 4"), "{why}");
        let more = study(AB, "{method: lhs, points: 7, seed: 3}");
        assert!(mismatch(&more, &d).unwrap().contains("6 points"));
        let renamed = study(
            "  - {name: a, range: [0, 5]}\n  - {name: c, range: [1, 2]}\n",
            LHS,
        );
        let why = mismatch(&renamed, &d).unwrap();
        assert!(
            why.starts_with("its parameters [\"a\", \"b\"] differ"),
            "{why}"
        );
        // A narrower range leaves some points outside it.
        let narrow = study(
            "  - {name: a, range: [0, 1]}\n  - {name: b, range: [1, 2]}\n",
            LHS,
        );
        let why = mismatch(&narrow, &d).unwrap();
        assert!(why.contains("outside the range [0, 1]"), "{why}");
    }

    #[test]
    fn points_added_later_do_not_make_a_design_stale() {
        let s = study(AB, LHS);
        let d = crate::design::augment(&design_of(&s), &s.design_variables(), 3).unwrap();
        assert_eq!(d.points.len(), 9);
        assert_eq!(mismatch(&s, &d), None);
    }
}
