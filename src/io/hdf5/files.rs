//! Finding what a mapping reads: the files a per-configuration template names, the
//! configuration list of a layout, and every dataset path inside a file.

use super::dataset::dataset_error;
use super::mapping::{Fields, Layout, Mapping};
use super::open::open_file;
use super::template::{Captures, Template};
use crate::error::{Error, Result};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// Files with the values their path gave to the placeholders.
pub type FileList = Vec<(PathBuf, Captures)>;

/// Deepest group nesting walked (a damaged file may link a group into itself).
pub(super) const MAX_DEPTH: usize = 32;

/// The files of a (non-packed) layout with their placeholder values, the configuration
/// numbers in ascending order, and whether datasets hold a configuration axis.
pub fn layout_files(m: &Mapping) -> Result<(FileList, Vec<i64>, bool)> {
    Ok(match &m.layout {
        Layout::PerConfig { base, files } => {
            let files = list_files(base, files)?;
            let mut configs = BTreeSet::new();
            for (p, caps) in &files {
                let f = Fields {
                    file: caps,
                    dataset: &Vec::new(),
                    fixed: &m.fixed,
                };
                let c = f.config().map_err(|e| Error::Table {
                    path: p.clone(),
                    message: e,
                })?;
                configs.insert(c);
            }
            (files, configs.into_iter().collect(), false)
        }
        Layout::OneFile { file, configs } => {
            let (h5, _) = open_file(file)?;
            let list = read_configs(&h5, file, configs)?;
            (vec![(file.clone(), Vec::new())], list, true)
        }
        Layout::Packed(_) => {
            return Err(Error::config("a packed file is read by `read_packed`"));
        }
    })
}

/// The files a per-configuration template names, sorted by configuration (then path), with
/// the values of their placeholders.
pub fn list_files(base: &Path, tpl: &Template) -> Result<FileList> {
    let text = tpl.text();
    // A pipeline given as a bare file name has an empty base: the working directory (which
    // `read_dir` must be told as `.`).
    let base = if base.as_os_str().is_empty() {
        Path::new(".")
    } else {
        base
    };
    let mut found: Vec<(PathBuf, Captures)> = vec![(
        if text.starts_with('/') {
            PathBuf::from("/")
        } else {
            base.to_path_buf()
        },
        Vec::new(),
    )];
    for comp in text.split('/').filter(|c| !c.is_empty()) {
        let mut next = Vec::new();
        if !comp.contains('{') {
            for (dir, caps) in found {
                next.push((dir.join(comp), caps));
            }
        } else {
            let part = Template::parse(comp, "data.hdf5.files")?;
            for (dir, caps) in found {
                let Ok(entries) = std::fs::read_dir(&dir) else {
                    continue;
                };
                for entry in entries.flatten() {
                    let name = entry.file_name();
                    let Some(name) = name.to_str() else { continue };
                    let Some(new) = part.matches(name) else {
                        continue;
                    };
                    let agrees = new
                        .iter()
                        .all(|(n, v)| caps.iter().all(|(m, w)| m != n || w == v));
                    if agrees {
                        let mut all = caps.clone();
                        all.extend(new);
                        next.push((dir.join(name), all));
                    }
                }
            }
        }
        found = next;
    }
    found.retain(|(p, _)| p.is_file());
    let config_of = |caps: &Captures| {
        caps.iter()
            .find(|(n, _)| *n == "config")
            .and_then(|(_, v)| v.trim_start_matches('+').parse::<i64>().ok())
    };
    found.sort_by(|a, b| (config_of(&a.1), &a.0).cmp(&(config_of(&b.1), &b.0)));
    if found.is_empty() {
        return Err(Error::Table {
            path: base.join(text),
            message: format!(
                "no file matches the template `{text}` (relative to {})",
                base.display()
            ),
        });
    }
    Ok(found)
}

/// Every dataset path in `file`, depth first, sorted within each group.
pub fn dataset_paths(file: &hdf5::File, path: &Path) -> Result<Vec<String>> {
    fn walk(
        g: &hdf5::Group,
        prefix: &str,
        depth: usize,
        out: &mut Vec<String>,
    ) -> hdf5::Result<()> {
        if depth > MAX_DEPTH {
            return Err(hdf5::Error::from(
                "groups nested too deeply (a link cycle?)",
            ));
        }
        for name in g.member_names()? {
            let full = format!("{prefix}/{name}");
            match g.loc_type_by_name(&name)? {
                hdf5::LocationType::Group => walk(&g.group(&name)?, &full, depth + 1, out)?,
                hdf5::LocationType::Dataset => out.push(full),
                _ => {}
            }
        }
        Ok(())
    }
    let mut out = Vec::new();
    walk(file, "", 0, &mut out).map_err(|e| Error::Table {
        path: path.to_path_buf(),
        message: format!("cannot list the datasets (damaged file?): {e}"),
    })?;
    Ok(out)
}

/// The configuration numbers of a one-file layout: a one-dimensional integer dataset.
fn read_configs(h5: &hdf5::File, path: &Path, name: &str) -> Result<Vec<i64>> {
    let err = |m: String| dataset_error(path, name, m);
    let ds = h5
        .dataset(name)
        .map_err(|e| err(format!("cannot open the configuration list: {e}")))?;
    let desc = ds
        .dtype()
        .and_then(|t| t.to_descriptor())
        .map_err(|e| err(format!("cannot read its type: {e}")))?;
    if !matches!(
        desc,
        hdf5::types::TypeDescriptor::Integer(_) | hdf5::types::TypeDescriptor::Unsigned(_)
    ) {
        return Err(err(format!(
            "holds {desc}; configuration numbers must be integers"
        )));
    }
    let shape = ds.shape();
    if shape.len() != 1 {
        return Err(err(format!("has shape {shape:?}; expected one axis")));
    }
    let len = std::fs::metadata(path)
        .map_err(|e| Error::io(path, e))?
        .len();
    if (shape[0] as u64).saturating_mul(ds.dtype().map_or(8, |t| t.size()) as u64) > len {
        return Err(err("is larger than the file: damaged or truncated".into()));
    }
    let v: Vec<i64> = ds
        .read_raw::<i64>()
        .map_err(|e| err(format!("cannot read: {e}")))?;
    if v.is_empty() {
        return Err(err("is empty".into()));
    }
    if let Some(w) = v.windows(2).find(|w| w[0] >= w[1]) {
        return Err(err(format!(
            "must list configurations in strictly ascending order; found {} then {}",
            w[0], w[1]
        )));
    }
    Ok(v)
}
