//! The simulation model file (`construe simulate MODEL.yaml`, and a spec's `report.truth_model`):
//! reading, parsing and checking, with problems rendered like the spec's (file:line:column, the
//! line, a caret, a hint). Central type: `ModelFile` (the parsed file with its source text and
//! node positions). Format in docs/simulate.md; drawing is `stats::simulate`, writing the drawn
//! table is `data::write`.

pub mod types;
pub mod validate;

use std::path::{Path, PathBuf};

use thiserror::Error;

pub use types::SimulationModel;
pub use validate::{ModelFinding, ModelProblem};

use crate::spec::positions::{Position, Positions};
use crate::spec::{Diagnostic, Report};
use construe_stats::simulate::Model;

/// A model file that could not be read or is not a valid model.
#[derive(Debug, Error)]
pub enum ModelFileError {
    #[error("cannot read model file `{}`\n  caused by: {source}", path.display())]
    Read { path: PathBuf, source: std::io::Error },
    #[error("{0}")]
    Invalid(Report),
}

/// A model file read from disk and type-checked, with what is needed to point at its nodes.
#[derive(Debug, Clone)]
pub struct ModelFile {
    pub path: PathBuf,
    pub source: String,
    pub positions: Positions,
    pub model: SimulationModel,
}

impl ModelFile {
    /// Reads `path` (through `fsguard`: a FIFO or device is refused, never waited on) and parses it.
    pub fn read(path: &Path) -> Result<ModelFile, ModelFileError> {
        let source = crate::fsguard::read_regular_text(path, crate::fsguard::MAX_TEXT_BYTES)
            .map_err(|source| ModelFileError::Read { path: path.into(), source: crate::fsguard::hinted(source) })?;
        Self::parse(path, source).map_err(ModelFileError::Invalid)
    }

    /// Parses model text as if read from `path`. Syntax errors, keys written twice in one
    /// mapping, unknown keys and type errors come back as a `Report` pointing into the file.
    pub fn parse(path: &Path, source: String) -> Result<ModelFile, Report> {
        let source = match source.strip_prefix('\u{feff}') {
            Some(rest) => rest.to_string(),
            None => source,
        };
        let positions = match Positions::index(&source) {
            Ok(p) => p,
            Err(e) => {
                let finding = ModelFinding {
                    problem: ModelProblem::Syntax { message: e.message },
                    path: String::new(),
                    on_key: false,
                };
                let mut r = Report::default();
                r.push(diagnostic(&finding).at(path, &source, Some(e.position), 1));
                return Err(r);
            }
        };
        let mut report = Report::default();
        for d in positions.duplicates() {
            let problem =
                ModelProblem::DuplicateKey { parent: d.parent.clone(), key: d.key.clone(), first_line: d.first.line };
            let help = problem.help();
            report.push(
                Diagnostic::error(problem.to_string())
                    .at(path, &source, Some(d.second), d.key.chars().count())
                    .with_help_opt(help),
            );
        }
        if !report.diagnostics.is_empty() {
            return Err(report);
        }
        match serde_yaml::from_str::<SimulationModel>(&source) {
            Ok(model) => Ok(ModelFile { path: path.to_path_buf(), source, positions, model }),
            Err(e) => {
                let position = e.location().map(|l| Position { line: l.line(), column: l.column() });
                let message = e.to_string();
                let message = message.rfind(" at line ").map_or(message.clone(), |i| message[..i].to_string());
                report
                    .push(Diagnostic::error(ModelProblem::Type { message }.to_string()).at(path, &source, position, 1));
                Err(report)
            }
        }
    }

    /// Checks the model (every problem at once, positioned) and returns what drawing needs.
    pub fn check(&self) -> Result<Model, Report> {
        let findings = validate::validate(&self.model);
        if findings.is_empty() {
            return Ok(self.model.plain());
        }
        Err(self.diagnose(findings))
    }

    /// Turns findings into positioned diagnostics, sorted by position.
    pub fn diagnose(&self, findings: Vec<ModelFinding>) -> Report {
        let mut report = Report::default();
        for f in findings {
            let position = if f.path.is_empty() {
                None
            } else if f.on_key {
                self.positions.key(&f.path)
            } else {
                self.positions.value(&f.path)
            };
            let width = if f.on_key {
                f.path.rsplit('.').next().map_or(1, |k| k.chars().count())
            } else {
                self.positions.width(&f.path).unwrap_or(1)
            };
            report.push(diagnostic(&f).at(&self.path, &self.source, position, width));
        }
        report.sort();
        report
    }
}

fn diagnostic(f: &ModelFinding) -> Diagnostic {
    Diagnostic::error(f.problem.to_string()).with_help_opt(f.problem.help())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn file(yaml: &str) -> ModelFile {
        ModelFile::parse(Path::new("model.yaml"), yaml.into()).unwrap()
    }

    /// Each problem as `line:column message`, in file order.
    fn problems(yaml: &str) -> Vec<String> {
        let report = file(yaml).check().unwrap_err();
        report
            .diagnostics
            .iter()
            .map(|d| {
                let p = d.location.as_ref().and_then(|l| l.position).unwrap();
                format!("{}:{} {}", p.line, p.column, d.message)
            })
            .collect()
    }

    #[test]
    fn every_problem_is_reported_at_its_node() {
        let found = problems(
            "simulate: 1
missing: 1.0
constructs: [{name: a, variance: -1}, {name: b, variance: 1, total_variance: 1}]
paths: [{from: a, to: zz, coefficient: 1}]
items:
  - {name: x, construct: nope, loading: 1, error_variance: -0.5, thresholds: [0, 0]}
  - {name: y, construct: a, loading: 1, error_variance: 1, thresholds: [], missing: -0.1,
     cross_loadings: [{construct: a, loading: 0.2}, {construct: other, loading: 0.1}]}
  - {name: x, construct: a, loading: 1, error_variance: 1, thresholds: [1, 0.5]}
observed: [{name: s, construct: a, reliability: 1.5}]
correlated_errors: [{items: [x, ghost], covariance: 0.1}]
",
        );
        let expected = [
            "2:10 model: missing rate 1 is outside [0, 1)",
            "3:34 construct `a`: variance -1 is negative",
            "3:78 construct `b`: give `variance` or `total_variance`, not both",
            "4:23 path `a` -> `zz` names unknown construct `zz`",
            "6:26 item `x` names unknown construct `nope`",
            "6:60 item `x`: error variance -0.5 is negative",
            "6:82 item `x`: thresholds must increase strictly, but 0 is followed by 0",
            "7:72 item `y`: `thresholds` is empty (give at least one cut point)",
            "7:85 item `y`: missing rate -0.1 is outside [0, 1)",
            "8:35 item `y` loads on construct `a` twice",
            "8:65 item `y` names unknown construct `other`",
            "9:12 column `x` is declared twice",
            "9:76 item `x`: thresholds must increase strictly, but 1 is followed by 0.5",
            "10:49 observed variable `s`: reliability 1.5 is outside (0, 1]",
            "11:33 a correlated error names unknown item `ghost`",
        ];
        assert_eq!(found, expected);
    }

    #[test]
    fn problems_render_like_the_spec_diagnostics() {
        let yaml = "simulate: 1\nconstructs:\n  - {name: trust}\nitems:\n  - {name: t1, construct: trsut, loading: 1, error_variance: 1}\n";
        let report = file(yaml).check().unwrap_err();
        assert_eq!(
            report.to_string(),
            "error: item `t1` names unknown construct `trsut`\n  at model.yaml:5:27\n  5 |   - {name: t1, construct: trsut, loading: 1, error_variance: 1}\n    |                           ^^^^^\n  hint: did you mean `trust`?\n\n1 error and 0 warnings"
        );
    }

    #[test]
    fn what_only_the_numbers_show_is_positioned_too() {
        let base = "simulate: 1\nconstructs: [{name: a}, {name: b}, {name: c}]\n\
                    items: [{name: x, construct: a, loading: 1, error_variance: 1}]\n";
        let found = problems(&format!(
            "{base}paths:\n  - {{from: a, to: b, coefficient: 1}}\n  - {{from: b, to: c, coefficient: 1}}\n  - {{from: c, to: a, coefficient: 1}}\n"
        ));
        assert_eq!(found, ["5:5 structural paths form a cycle: `a` -> `b` -> `c` -> `a`"]);
        let found = problems(
            "simulate: 1\nconstructs: [{name: a}, {name: b, total_variance: 0.5}]\npaths: [{from: a, to: b, coefficient: 0.9}]\nitems: [{name: x, construct: b, loading: 1, error_variance: 1}]\n",
        );
        assert_eq!(found, ["2:51 construct `b`: total variance 0.5 is less than the 0.8100 its paths explain"]);
        let found = problems(
            "simulate: 1\nconstructs: [{name: a}]\nitems:\n  - {name: x, construct: a, loading: 1, error_variance: 0.25}\n  - {name: y, construct: a, loading: 1, error_variance: 1}\ncorrelated_errors:\n  - {items: [x, y], covariance: 0.5}\n",
        );
        assert_eq!(found.len(), 1);
        assert!(
            found[0].starts_with("7:33 correlated error `x` ~ `y`: covariance 0.5 must be smaller in size than 0.5000"),
            "{found:?}"
        );
        let found = problems(
            "simulate: 2\nconstructs: [{name: a}]\nitems: [{name: x, construct: a, loading: 1, error_variance: 1}]\n",
        );
        assert_eq!(found, ["1:11 model format version 2 is not supported (this build reads version 1)"]);
    }

    #[test]
    fn unknown_and_repeated_keys_are_rejected_with_positions() {
        let err = ModelFile::parse(
            Path::new("model.yaml"),
            "simulate: 1\nconstructs: [{name: a, varience: 1}]\nitems: [{name: x, construct: a, loading: 1, error_variance: 1}]".into(),
        )
        .unwrap_err();
        let text = err.to_string();
        assert!(text.contains("unknown field `varience`") && text.contains("at model.yaml:2:"), "{text}");
        assert!(ModelFile::parse(Path::new("m.yaml"), "simulate: 1\nconstructs: []\nsamples: 3".into()).is_err());
        let err =
            ModelFile::parse(Path::new("m.yaml"), "simulate: 1\nsimulate: 1\nconstructs: []\n".into()).unwrap_err();
        assert!(
            err.to_string().contains("key `simulate` appears twice in the model's top level (first on line 1)"),
            "{err}"
        );
    }

    #[test]
    fn documented_examples_parse_and_validate() {
        let docs = [include_str!("../../docs/simulate.md"), include_str!("types.rs")];
        for (k, text) in docs.iter().enumerate() {
            // The first YAML block of each: the user guide's minimal model, then the one in the
            // doc comment of `SimulationModel` (with its `/// ` prefixes removed).
            let text = if k == 1 {
                text.lines()
                    .filter_map(|l| l.strip_prefix("/// ").or(l.strip_prefix("///")))
                    .collect::<Vec<_>>()
                    .join("\n")
            } else {
                text.to_string()
            };
            let start = text.find("```yaml\n").unwrap() + 8;
            let end = start + text[start..].find("```").unwrap();
            let model = file(&text[start..end]).check().unwrap();
            assert_eq!(model.draw(20, 1).unwrap().rows(), 20);
        }
    }

    #[test]
    fn demo_model_parses_validates_and_draws() {
        let demo = file(include_str!("../../pipelines/transit/model.yaml"));
        let model = demo.check().unwrap();
        let truth = model.truth().unwrap();
        let items = truth.variables.len();
        assert!((21..=25).contains(&items));
        for l in truth.loadings.iter().filter(|l| l.main) {
            assert!((0.6 - 1e-9..=0.85 + 1e-9).contains(&l.standardized.abs()), "{}: {}", l.variable, l.standardized);
        }
        assert_eq!(truth.impure, ["cr5", "tr6", "in2"]);
        let fare = truth.reliabilities.iter().find(|r| r.variable == "fare_share").unwrap();
        assert!((fare.reliability - 0.7).abs() < 1e-12);
        // Standardized constructs: every latent variance is 1.
        assert!((0..5).all(|k| (truth.latent_covariance[(k, k)] - 1.0).abs() < 1e-12));

        let table = model.draw(demo.model.n, demo.model.seed).unwrap();
        assert_eq!(table.rows(), 600);
        assert_eq!(&table.columns[..2], ["rider_id", "wave"]);
        assert_eq!(table.values[0][599], Some(600.0));
        for (j, name) in table.columns.iter().enumerate().skip(2) {
            let present = table.values[j].iter().flatten();
            if table.integer_columns[j] {
                assert!(present.clone().all(|&v| (1.0..=5.0).contains(&v) && v.fract() == 0.0), "{name}");
            }
        }
    }
}
