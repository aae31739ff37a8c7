//! A session: the named objects that cells create and later cells use.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;

use super::files::DataFiles;
use super::output::{CellError, CellOutcome};
use super::parse::split_statements;
use super::statements;
use crate::graph::Graph;
use crate::infer::fit::Fit;
use crate::model::{Model, ModelSpec};
use crate::query::{JointFit, JointModel, Simulation};
use crate::table::Table;
pub(crate) use crate::names::edit_distance;

/// How a running cell is steered from outside: a cancel flag (set by an
/// interrupt) and a progress sink for long fits.
pub struct RunControl<'a> {
    pub cancel: &'a AtomicBool,
    pub progress: &'a (dyn Fn(&str) + Sync),
}

/// A simulation and the mechanism lines it was written with, per node.
pub(crate) struct SimulationRecord {
    pub(crate) simulation: Simulation,
    /// `(node, mechanism as written)`, in the order written.
    pub(crate) mechanisms: Vec<(String, String)>,
}

/// Named tables, graphs and models, plus the folder that relative paths in
/// cells are read from.
#[derive(Default)]
pub struct Session {
    pub(crate) base_dir: PathBuf,
    pub(crate) tables: BTreeMap<String, Table>,
    /// Tables whose rows stay on disk (`stay on disk`, feature `on_disk`).
    #[cfg(feature = "on_disk")]
    pub(crate) disk_tables: BTreeMap<String, crate::table::on_disk::DiskTable>,
    pub(crate) graphs: BTreeMap<String, Graph>,
    pub(crate) models: BTreeMap<String, Model>,
    pub(crate) fits: BTreeMap<String, Fit>,
    /// The specification each model was built from (for `recover`).
    pub(crate) specs: BTreeMap<String, ModelSpec>,
    /// Whole-graph models (`joint`) and their latest fits.
    pub(crate) joints: BTreeMap<String, JointModel>,
    pub(crate) joint_fits: BTreeMap<String, JointFit>,
    /// Simulations (`simulate`), by the name of the table they made.
    pub(crate) simulations: BTreeMap<String, SimulationRecord>,
    /// The most recent figure any statement drew, for `save figure`.
    pub(crate) last_figure: Option<String>,
    /// The files read as data (tables, DOT graphs): never written over.
    pub(crate) data_files: DataFiles,
    /// The mass of intervals set by an `intervals P%` statement (`None`:
    /// [`crate::draws::summary::DEFAULT_MASS`]).
    pub(crate) interval_setting: Option<f64>,
}

impl Session {
    /// A new, empty session reading relative paths from `base_dir`.
    pub fn new(base_dir: impl Into<PathBuf>) -> Session {
        Session { base_dir: base_dir.into(), ..Session::default() }
    }

    /// The interval mass a statement uses: its own `intervals P%` option,
    /// else the session's setting, else 90%.
    pub(crate) fn interval_mass(&self, option: Option<f64>) -> f64 {
        option.or(self.interval_setting).unwrap_or(crate::draws::summary::DEFAULT_MASS)
    }

    /// The folder relative paths are read from.
    pub fn base_dir(&self) -> &Path {
        &self.base_dir
    }

    /// Resolve a path written in a cell against the session's folder.
    pub fn resolve(&self, path: &str) -> PathBuf {
        let p = Path::new(path);
        if p.is_absolute() { p.to_path_buf() } else { self.base_dir.join(p) }
    }

    /// Resolve a path a statement on cell line `line` will write, refusing
    /// a file this session read as data.
    pub(crate) fn output_path(&self, path: &str, line: usize) -> Result<PathBuf, CellError> {
        let file = self.resolve(path);
        match self.data_files.overwritten_by(&file) {
            Some(data) => Err(CellError::at(
                line,
                format!("{path} is {}, which this session read as data; write to another file name", data.display()),
            )),
            None => Ok(file),
        }
    }

    pub fn table(&self, name: &str) -> Option<&Table> {
        self.tables.get(name)
    }

    pub fn graph(&self, name: &str) -> Option<&Graph> {
        self.graphs.get(name)
    }

    pub fn model(&self, name: &str) -> Option<&Model> {
        self.models.get(name)
    }

    /// The table model or joint model `name` was built on.
    pub fn table_of(&self, name: &str) -> Option<&Table> {
        let table = match (self.models.get(name), self.joints.get(name)) {
            (Some(model), _) => model.table_name(),
            (None, Some(joint)) => joint.table.as_str(),
            (None, None) => return None,
        };
        self.tables.get(table)
    }

    /// The latest fit of model `name`.
    pub fn fit(&self, name: &str) -> Option<&Fit> {
        self.fits.get(name)
    }

    /// Publish a table under `name` (used by Rust cells and by `simulate`).
    pub fn put_table(&mut self, name: &str, mut table: Table) {
        table.name = name.to_string();
        #[cfg(feature = "on_disk")]
        self.disk_tables.remove(name);
        self.tables.insert(name.to_string(), table);
    }

    /// Publish a table whose rows stay on disk under `name`.
    #[cfg(feature = "on_disk")]
    pub fn put_disk_table(&mut self, name: &str, mut table: crate::table::on_disk::DiskTable) {
        table.name = name.to_string();
        self.tables.remove(name);
        self.disk_tables.insert(name.to_string(), table);
    }

    /// Refuses a statement that needs the rows of model `model`'s table
    /// when they stay on disk, saying what does work there.
    pub(crate) fn refuse_on_disk(&self, model: &Model, line: usize) -> Result<(), CellError> {
        #[cfg(feature = "on_disk")]
        if model.on_disk().is_some() {
            return Err(on_disk_refusal(model.table_name(), line));
        }
        let _ = (model, line);
        Ok(())
    }

    /// Names of every object in the session, by kind (for completion).
    pub fn names(&self) -> Vec<(String, &'static str)> {
        let tables = self.tables.keys().map(|k| (k.clone(), "table"));
        let graphs = self.graphs.keys().map(|k| (k.clone(), "graph"));
        let models = self.models.keys().map(|k| (k.clone(), "model"));
        let joints = self.joints.keys().map(|k| (k.clone(), "joint model"));
        tables.chain(graphs).chain(models).chain(joints).collect()
    }

    /// Run every statement of a cell in order. The first error stops the
    /// cell; displays made before it are kept.
    pub fn run_cell(&mut self, cell: &str, control: &RunControl) -> CellOutcome {
        let mut outcome = CellOutcome::default();
        let statements = match split_statements(cell) {
            Ok(s) => s,
            Err(e) => {
                outcome.error = Some(e);
                return outcome;
            }
        };
        for st in &statements {
            match statements::run(self, st, control, &mut outcome.warnings) {
                Ok(displays) => {
                    if let Some(svg) = displays.iter().rev().find_map(|d| d.svg.clone()) {
                        self.last_figure = Some(svg);
                    }
                    outcome.displays.extend(displays)
                }
                Err(e) => {
                    outcome.error = Some(e);
                    break;
                }
            }
        }
        outcome
    }

    pub(crate) fn require_table(&self, name: &str, line: usize) -> Result<&Table, CellError> {
        #[cfg(feature = "on_disk")]
        if self.disk_tables.contains_key(name) {
            return Err(on_disk_refusal(name, line));
        }
        self.tables.get(name).ok_or_else(|| {
            CellError::at(line, format!("there is no table named {name}{}", suggest(name, self.tables.keys())))
        })
    }

    pub(crate) fn require_graph(&self, name: &str, line: usize) -> Result<&Graph, CellError> {
        self.graphs.get(name).ok_or_else(|| {
            CellError::at(line, format!("there is no graph named {name}{}", suggest(name, self.graphs.keys())))
        })
    }
}

/// Why a statement that needs rows in memory does not run on a table on disk.
#[cfg(feature = "on_disk")]
fn on_disk_refusal(table: &str, line: usize) -> CellError {
    CellError::at(
        line,
        format!(
            "table {table} stays on disk, and this statement needs its rows in memory; on a table on disk, `model`, \
             `fit`, `show`, `export … draws` and `plot … estimates|mixing` run (remove \"stay on disk\" to load the \
             table into memory if it fits there)"
        ),
    )
}

/// " (did you mean a, b?)" for names within a small edit distance, or a list
/// of what exists.
pub(crate) fn suggest<'a>(name: &str, known: impl Iterator<Item = &'a String>) -> String {
    let known: Vec<&String> = known.collect();
    if known.is_empty() {
        return "; none has been made in this session yet".to_string();
    }
    let mut near: Vec<&String> = known.iter().copied().filter(|k| edit_distance(k, name) <= 2).collect();
    near.sort();
    if near.is_empty() {
        let list: Vec<&str> = known.iter().map(|s| s.as_str()).collect();
        format!("; the session has: {}", list.join(", "))
    } else {
        let list: Vec<&str> = near.iter().map(|s| s.as_str()).collect();
        format!(" (did you mean {}?)", list.join(" or "))
    }
}

