//! The HDF5 data source of a pipeline: where each correlator lives, as written in the
//! pipeline's `data.hdf5` section, and how the placeholders of a path become a channel key.
//!
//! It exists apart from the reader so that a build without the `hdf5` feature still parses
//! and validates the section (and then says how to enable the feature).

use super::template::{Captures, Template};
use crate::data::{
    Current, Diagram, Operators, Projector, ThreePointKey, TwoPointKey, CHANNEL_COLUMNS,
};
use crate::error::{Error, Result};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Correlators in HDF5 files: a packed ensemble file, per-configuration files, or one file
/// with a configuration axis (exactly one of `packed`, `files`, `file`).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Hdf5Source {
    /// A packed ensemble file written by `formfactory pack`; needs nothing else.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub packed: Option<PathBuf>,
    /// Per-configuration files: a path template relative to the pipeline file with a
    /// `{config}` placeholder, e.g. `raw/conf{config}.h5` (directories may hold placeholders
    /// too, e.g. `cfg{config}/src{source}.h5`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub files: Option<String>,
    /// One file holding every configuration along the first axis of each dataset.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub file: Option<PathBuf>,
    /// With `file`: the one-dimensional integer dataset of configuration numbers.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub configs: Option<String>,
    /// Dataset template of the two-point functions, e.g. `/2pt/{smear}/p{px}_{py}_{pz}`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub twopt: Option<String>,
    /// Dataset template of the three-point functions, e.g.
    /// `/3pt/tsep{tsep}/{current}/{projector}/pf{pfx}{pfy}{pfz}_q{qx}_{qy}_{qz}`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threept: Option<String>,
    /// Values of channel fields that no template holds, e.g. `{projector: unpol}`.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub fixed: BTreeMap<String, String>,
}

/// How the files are organised.
#[derive(Clone, Debug, PartialEq)]
pub enum Layout {
    /// A file written by `formfactory pack`.
    Packed(PathBuf),
    /// One file per configuration (or per configuration and source), found by the template;
    /// the template is relative to `base`.
    PerConfig {
        /// Directory the template is relative to.
        base: PathBuf,
        /// File path template.
        files: Template,
    },
    /// One file, configurations along the first axis of every dataset.
    OneFile {
        /// The file.
        file: PathBuf,
        /// Dataset with the configuration numbers.
        configs: String,
    },
}

/// A validated source: the layout plus the dataset templates.
#[derive(Clone, Debug, PartialEq)]
pub struct Mapping {
    /// Where the files are.
    pub layout: Layout,
    /// Two-point dataset template (absent for a packed file).
    pub twopt: Option<Template>,
    /// Three-point dataset template (absent for a packed file).
    pub threept: Option<Template>,
    /// Fixed channel fields.
    pub fixed: BTreeMap<String, String>,
}

/// Placeholders every layout may use: the configuration, the source position and the
/// operator labels of the variational method (CSV columns `sink_op`, `source_op`; both or
/// neither).
const COMMON_FIELDS: [&str; 4] = ["config", "source", "sink_op", "source_op"];
/// The operator-label pair.
const OPERATOR_FIELDS: [&str; 2] = ["sink_op", "source_op"];
/// The two-point channel fields every mapping must fill.
const TWOPT_REQUIRED: [&str; 3] = ["px", "py", "pz"];
/// Optional channel fields of the three-point table beside the channel columns.
const THREEPT_OPTIONAL: [&str; 2] = ["flavor", "diagram"];

/// The three-point channel fields every mapping must fill: the columns that name a channel
/// in every table ([`CHANNEL_COLUMNS`]) and `tsep`.
fn threept_required() -> impl Iterator<Item = &'static str> {
    CHANNEL_COLUMNS.into_iter().chain(["tsep"])
}

/// The placeholders a two-point dataset template may use.
fn twopt_fields() -> Vec<&'static str> {
    let mut f = COMMON_FIELDS.to_vec();
    f.extend(TWOPT_REQUIRED);
    f.push("smear");
    f
}

/// The placeholders a three-point dataset template (or a file template) may use.
fn threept_fields() -> Vec<&'static str> {
    let mut f = COMMON_FIELDS.to_vec();
    f.extend(threept_required());
    f.extend(THREEPT_OPTIONAL);
    f
}

impl Hdf5Source {
    /// Check the section and resolve paths against `base` (the pipeline's directory). `key`
    /// names the section in errors (`data.hdf5`).
    pub fn resolve(&self, base: &Path, key: &str) -> Result<Mapping> {
        let chosen = [
            self.packed.is_some(),
            self.files.is_some(),
            self.file.is_some(),
        ];
        if chosen.iter().filter(|c| **c).count() != 1 {
            return Err(Error::config(format!(
                "{key}: give exactly one of `packed` (a file written by `formfactory pack`), \
                 `files` (per-configuration files) or `file` (one file with a configuration axis)"
            )));
        }
        if let Some(p) = &self.packed {
            let extra = self.twopt.is_some()
                || self.threept.is_some()
                || self.configs.is_some()
                || !self.fixed.is_empty();
            if extra {
                return Err(Error::config(format!(
                    "{key}: a packed file describes itself; remove `twopt`, `threept`, `configs` and `fixed`"
                )));
            }
            return Ok(Mapping {
                layout: Layout::Packed(base.join(p)),
                twopt: None,
                threept: None,
                fixed: BTreeMap::new(),
            });
        }
        let config_axis = self.file.is_some();
        let parse = |t: &Option<String>, sub: &str, allowed: &[&str]| -> Result<Template> {
            let what = format!("{key}.{sub}");
            let text = t.as_deref().ok_or_else(|| {
                Error::config(format!("{what} is missing: give the dataset path template"))
            })?;
            let tpl = Template::parse(text, &what)?;
            check_fields(&tpl, &what, allowed)?;
            if config_axis && tpl.has("config") {
                return Err(Error::config(format!(
                    "{what}: with `file` the configurations are the first axis of each dataset; remove `{{config}}`"
                )));
            }
            Ok(tpl)
        };
        let twopt = parse(&self.twopt, "twopt", &twopt_fields())?;
        let threept = parse(&self.threept, "threept", &threept_fields())?;
        let mut fixable = threept_fields();
        fixable.retain(|f| *f != "config");
        fixable.push("smear");
        for name in self.fixed.keys() {
            if !fixable.contains(&name.as_str()) {
                return Err(Error::config(format!(
                    "{key}.fixed: `{name}` is not a channel field that can be fixed; expected one of {}",
                    fixable.join(", ")
                )));
            }
        }
        let layout = if let Some(f) = &self.files {
            let files = Template::parse(f, &format!("{key}.files"))?;
            if !files.has("config") {
                return Err(Error::config(format!(
                    "{key}.files: `{f}` has no `{{config}}` placeholder; per-configuration files must name their configuration"
                )));
            }
            check_fields(&files, &format!("{key}.files"), &threept_fields())?;
            Layout::PerConfig {
                base: base.to_path_buf(),
                files,
            }
        } else {
            let file = self.file.as_ref().map(|f| base.join(f)).unwrap_or_default();
            let configs = self.configs.clone().ok_or_else(|| {
                Error::config(format!(
                    "{key}.configs is missing: with `file`, name the dataset of configuration numbers, e.g. `/configs`"
                ))
            })?;
            Layout::OneFile { file, configs }
        };
        let mapping = Mapping {
            layout,
            twopt: Some(twopt),
            threept: Some(threept),
            fixed: self.fixed.clone(),
        };
        let required = [
            ("twopt", TWOPT_REQUIRED.to_vec()),
            ("threept", threept_required().collect()),
        ];
        for (kind, fields) in required {
            for f in fields {
                if !mapping.provides(kind, f) {
                    return Err(Error::config(format!(
                        "{key}.{kind}: the channel field `{f}` is in no template and not in `fixed`"
                    )));
                }
            }
            let [sink, source] = OPERATOR_FIELDS.map(|f| mapping.provides(kind, f));
            if sink != source {
                let [have, lack] = if sink {
                    OPERATOR_FIELDS
                } else {
                    [OPERATOR_FIELDS[1], OPERATOR_FIELDS[0]]
                };
                return Err(Error::config(format!(
                    "{key}.{kind}: `{have}` needs `{lack}` as well (operator labels come in pairs; give both in a template or in `fixed`, or neither)"
                )));
            }
        }
        Ok(mapping)
    }
}

fn check_fields(tpl: &Template, what: &str, allowed: &[&str]) -> Result<()> {
    for f in super::template::FIELDS {
        if tpl.has(f.name) && !allowed.contains(&f.name) {
            return Err(Error::config(format!(
                "{what}: the placeholder `{{{}}}` does not belong here; allowed: {}",
                f.name,
                allowed.join(", ")
            )));
        }
    }
    Ok(())
}

impl Mapping {
    /// Whether a template names a source position (then sources are averaged).
    pub fn provides_source(&self) -> bool {
        self.provides("twopt", "source") || self.provides("threept", "source")
    }

    /// Whether the field `name` of a `kind` (`twopt`/`threept`) channel gets a value from a
    /// template or from `fixed`.
    fn provides(&self, kind: &str, name: &str) -> bool {
        let tpl = if kind == "twopt" {
            &self.twopt
        } else {
            &self.threept
        };
        let in_files = matches!(&self.layout, Layout::PerConfig { files, .. } if files.has(name));
        in_files || tpl.as_ref().is_some_and(|t| t.has(name)) || self.fixed.contains_key(name)
    }
}

/// The placeholder values of one dataset: those of its file, its dataset path and the fixed
/// ones, looked up by name.
pub struct Fields<'a> {
    /// Captures of the file path.
    pub file: &'a Captures,
    /// Captures of the dataset path.
    pub dataset: &'a Captures,
    /// Fixed values.
    pub fixed: &'a BTreeMap<String, String>,
}

impl<'a> Fields<'a> {
    /// The value of `name`, if any.
    pub fn get(&self, name: &str) -> Option<&'a str> {
        let find = |c: &'a Captures| c.iter().find(|(n, _)| *n == name).map(|(_, v)| v.as_str());
        find(self.dataset)
            .or_else(|| find(self.file))
            .or_else(|| self.fixed.get(name).map(String::as_str))
    }

    fn int(&self, name: &str) -> std::result::Result<i64, String> {
        let v = self
            .get(name)
            .ok_or_else(|| format!("no value for `{name}`"))?;
        v.trim_start_matches('+')
            .parse()
            .map_err(|_| format!("`{name}` = `{v}` is not an integer"))
    }

    fn mom(&self, names: [&str; 3]) -> std::result::Result<[i32; 3], String> {
        let mut p = [0i32; 3];
        for (k, n) in names.iter().enumerate() {
            p[k] = i32::try_from(self.int(n)?)
                .map_err(|_| format!("`{n}` is out of range for a momentum component"))?;
        }
        Ok(p)
    }

    /// The configuration number, from the path.
    pub fn config(&self) -> std::result::Result<i64, String> {
        self.int("config")
    }

    /// The source position, if the mapping has one.
    pub fn source(&self) -> std::result::Result<Option<i64>, String> {
        self.get("source").map(|_| self.int("source")).transpose()
    }

    /// The operator pair, when the mapping gives both labels (checked when it was resolved).
    fn operators(&self) -> Option<Operators> {
        let [sink, source] = OPERATOR_FIELDS.map(|f| self.get(f));
        Some(Operators::new(sink?, source?))
    }

    /// The two-point key.
    pub fn twopt_key(&self) -> std::result::Result<TwoPointKey, String> {
        Ok(TwoPointKey {
            momentum: self.mom(["px", "py", "pz"])?,
            smear: self.get("smear").map(str::to_string),
            ops: self.operators(),
        })
    }

    /// The three-point key.
    pub fn threept_key(&self) -> std::result::Result<ThreePointKey, String> {
        let tsep = self.int("tsep")?;
        let tsep = u32::try_from(tsep)
            .ok()
            .filter(|t| *t <= crate::io::MAX_TIME)
            .ok_or_else(|| format!("tsep = {tsep} is out of range 0..={}", crate::io::MAX_TIME))?;
        let current = self.get("current").unwrap_or_default();
        let current = Current::parse(current).ok_or_else(|| {
            format!("unknown current `{current}`; expected V1..V4, A1..A4, S, P, T12..T34")
        })?;
        let projector = self.get("projector").unwrap_or_default();
        let projector = Projector::parse(projector).ok_or_else(|| {
            format!("unknown projector `{projector}`; expected unpol, pol1, pol2, pol3 or none")
        })?;
        let diagram = match self.get("diagram") {
            None => None,
            Some("connected") => Some(Diagram::Connected),
            Some("disconnected") => Some(Diagram::Disconnected),
            Some(d) => {
                return Err(format!(
                    "unknown diagram `{d}`; expected connected or disconnected"
                ))
            }
        };
        Ok(ThreePointKey {
            tsep,
            pf: self.mom(["pfx", "pfy", "pfz"])?,
            q: self.mom(["qx", "qy", "qz"])?,
            current,
            projector,
            flavor: self.get("flavor").map(str::to_string),
            diagram,
            ops: self.operators(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_channel_field_is_a_template_placeholder() {
        for name in twopt_fields().into_iter().chain(threept_fields()) {
            assert!(
                super::super::template::FIELDS
                    .iter()
                    .any(|f| f.name == name),
                "{name}"
            );
        }
    }

    #[test]
    fn operator_labels_come_in_pairs() {
        let src = |yaml: &str| serde_yaml_ng::from_str::<Hdf5Source>(yaml).unwrap();
        let one = src(
            "{files: 'c{config}.h5', twopt: '/a/p{px}_{py}_{pz}/{sink_op}', \
             threept: '/b/{tsep}/{current}/{projector}/{pfx}_{pfy}_{pfz}_{qx}_{qy}_{qz}'}",
        );
        let e = one.resolve(Path::new("."), "data.hdf5").unwrap_err();
        assert!(e.to_string().contains("`sink_op` needs `source_op`"), "{e}");
        // `fixed` holds for both tables: here the three-point table would get a source label only.
        let fixed = src(
            "{files: 'c{config}.h5', twopt: '/a/p{px}_{py}_{pz}/{sink_op}', \
             threept: '/b/{tsep}/{current}/{projector}/{pfx}_{pfy}_{pfz}_{qx}_{qy}_{qz}', \
             fixed: {source_op: g5}}",
        );
        let e = fixed.resolve(Path::new("."), "data.hdf5").unwrap_err();
        assert!(
            e.to_string()
                .contains("threept: `source_op` needs `sink_op`"),
            "{e}"
        );
        let both = src(
            "{files: 'c{config}.h5', twopt: '/a/p{px}_{py}_{pz}/{sink_op}/{source_op}', \
             threept: '/b/{tsep}/{current}/{projector}/{pfx}_{pfy}_{pfz}_{qx}_{qy}_{qz}'}",
        );
        let m = both.resolve(Path::new("."), "data.hdf5").unwrap();
        assert!(m.provides("twopt", "sink_op") && !m.provides("threept", "sink_op"));
    }
}
