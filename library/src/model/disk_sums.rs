//! The sums a fit needs, gathered by the embedded engine over a table on
//! disk (cargo feature `on_disk`) through aggregate functions of our own.
//!
//! SQL has sums of columns but no aggregate that builds a regression's
//! design row and adds up its outer products, so two are registered with
//! the engine here:
//!
//! * `waypath_cross_products`: `XᵀX`, `Xᵀyc`, `ycᵀyc`, `n`, each design
//!   column's sum and the rows where it is not 0 — the normal family's
//!   sufficient statistics (`family::gaussian`), with `yc = y − ȳ` centred
//!   at the mean the first pass found;
//! * `waypath_newton_sums`: at given coefficients, the log-likelihood of a
//!   bernoulli or poisson outcome, its gradient `Xᵀ(y − μ)` and the
//!   information `XᵀWX` (W = μ(1 − μ), or μ): one Newton step per pass.
//!
//! Each partition of the scan keeps one accumulator (a few vectors of the
//! design's width, never rows), the engine merges their states, so memory
//! stays bounded whatever the number of rows. The design row is the one
//! [`TermRecipe`] lays out in memory: an intercept, one indicator per level
//! of the first category, offsets of a later category, centred slopes and
//! slopes per level. The cancel flag is read once per batch.
//!
//! Each aggregate is a [`DesignSums`] whose settings (the row layout, the
//! outcome's centre or the coefficients) serialize to JSON, floats as their
//! bits: with the feature `across_machines` the plan codecs
//! (`model::plan_codec`) carry them to a scheduler and its executors, which
//! rebuild the same aggregate there.

use std::collections::HashMap;
use std::hash::{Hash, Hasher};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, BinaryArray};
use datafusion::arrow::datatypes::{DataType, Float64Type};
use datafusion::common::ScalarValue;
use datafusion::error::{DataFusionError, Result as EngineResult};
use datafusion::logical_expr::function::AccumulatorArgs;
use datafusion::logical_expr::{Accumulator, AggregateUDF, AggregateUDFImpl, Expr, Signature, Volatility};
use serde::{Deserialize, Serialize};

use crate::table::on_disk::DiskTable;

use super::family::Family;
use super::terms::TermRecipe;

/// The error text an accumulator returns when the cancel flag is set.
pub(crate) use crate::table::on_disk::INTERRUPTED;

/// The names of the two aggregates.
pub(crate) const CROSS_PRODUCTS: &str = "waypath_cross_products";
pub(crate) const NEWTON_SUMS: &str = "waypath_newton_sums";

/// One input of the aggregate beside the outcome.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
enum Input {
    Number(String),
    Levels { column: String, levels: Vec<String> },
}

/// Where a design column's value comes from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
enum Part {
    One,
    /// `[input = level]`.
    Indicator { input: usize, level: usize },
    /// `x − centre`.
    Centred {
        input: usize,
        #[serde(with = "exact")]
        centre: f64,
    },
    /// `(x − centre) · [c = level]`.
    CentredAt {
        input: usize,
        #[serde(with = "exact")]
        centre: f64,
        by: usize,
        level: usize,
    },
}

/// Floats in an aggregate's settings travel as their bits, so a centre or
/// a coefficient arrives on another machine exactly as it left.
mod exact {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(value: &f64, to: S) -> Result<S::Ok, S::Error> {
        to.serialize_u64(value.to_bits())
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(from: D) -> Result<f64, D::Error> {
        u64::deserialize(from).map(f64::from_bits)
    }
}

/// [`exact`] for a list of floats.
mod exact_all {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(values: &[f64], to: S) -> Result<S::Ok, S::Error> {
        to.collect_seq(values.iter().map(|v| v.to_bits()))
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(from: D) -> Result<Vec<f64>, D::Error> {
        Vec::<u64>::deserialize(from).map(|bits| bits.into_iter().map(f64::from_bits).collect())
    }
}

/// The design row of a model's recipes, read from the engine's arrays.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct RowLayout {
    inputs: Vec<Input>,
    parts: Vec<Part>,
}

impl RowLayout {
    /// The layout of `recipes`; `Err` names a term a table on disk cannot
    /// lay out yet (powers and splines need their basis planned over the
    /// rows' quantiles and sds).
    pub(crate) fn new(recipes: &[TermRecipe]) -> Result<RowLayout, String> {
        let mut layout = RowLayout { inputs: Vec::new(), parts: Vec::new() };
        for recipe in recipes {
            match recipe {
                TermRecipe::Intercept => layout.parts.push(Part::One),
                TermRecipe::LevelIntercepts { column, levels } => {
                    let input = layout.levels_input(column, levels);
                    layout.parts.extend((0..levels.len()).map(|level| Part::Indicator { input, level }));
                }
                TermRecipe::LevelOffsets { column, levels } => {
                    let input = layout.levels_input(column, levels);
                    layout.parts.extend((1..levels.len()).map(|level| Part::Indicator { input, level }));
                }
                TermRecipe::Slope { column, centre, .. } => {
                    let input = layout.number_input(column);
                    layout.parts.push(Part::Centred { input, centre: *centre });
                }
                TermRecipe::SlopePer { column, centre, by, levels, .. } => {
                    let input = layout.number_input(column);
                    let by = layout.levels_input(by, levels);
                    layout.parts.extend((0..levels.len()).map(|level| Part::CentredAt { input, centre: *centre, by, level }));
                }
                TermRecipe::Powers { column, .. } | TermRecipe::Spline { column, .. } | TermRecipe::Steps { column, .. } => {
                    return Err(format!(
                        "the terms powers(…), spline(…) and steps(…) of {column} are not fitted on a table on disk yet; use {column} \
                         as a plain slope, or load the table into memory (without \"stay on disk\")"
                    ));
                }
            }
        }
        Ok(layout)
    }

    /// The number of design columns.
    pub(crate) fn width(&self) -> usize {
        self.parts.len()
    }

    fn number_input(&mut self, column: &str) -> usize {
        self.input(Input::Number(column.to_string()))
    }

    fn levels_input(&mut self, column: &str, levels: &[String]) -> usize {
        self.input(Input::Levels { column: column.to_string(), levels: levels.to_vec() })
    }

    fn input(&mut self, wanted: Input) -> usize {
        match self.inputs.iter().position(|i| *i == wanted) {
            Some(k) => k,
            None => {
                self.inputs.push(wanted);
                self.inputs.len() - 1
            }
        }
    }

    /// The aggregate's arguments: the outcome, then each input; and
    /// whether each is text (else a 64-bit float).
    fn arguments(&self, table: &DiskTable, outcome: &str) -> Result<(Vec<Expr>, Vec<bool>), String> {
        let mut exprs = Vec::new();
        let mut types = Vec::new();
        for name in std::iter::once(outcome).chain(self.inputs.iter().map(|i| match i {
            Input::Number(c) | Input::Levels { column: c, .. } => c.as_str(),
        })) {
            let column = table.column(name).ok_or_else(|| format!("table {} has no column {name}", table.name))?;
            exprs.push(table.value_expr(column));
            types.push(column.text);
        }
        Ok((exprs, types))
    }
}

/// One batch's inputs, read once: numbers as slices, levels as indices.
struct Columns {
    outcome: Vec<f64>,
    inputs: Vec<Column>,
}

enum Column {
    Numbers(Vec<f64>),
    Levels(Vec<usize>),
}

impl Columns {
    fn read(layout: &RowLayout, values: &[ArrayRef]) -> EngineResult<Columns> {
        let outcome = numbers(&values[0])?;
        let inputs = layout
            .inputs
            .iter()
            .zip(&values[1..])
            .map(|(input, array)| match input {
                Input::Number(_) => numbers(array).map(Column::Numbers),
                Input::Levels { column, levels } => level_indices(array, column, levels).map(Column::Levels),
            })
            .collect::<EngineResult<Vec<_>>>()?;
        Ok(Columns { outcome, inputs })
    }

    fn number(&self, input: usize, row: usize) -> f64 {
        match &self.inputs[input] {
            Column::Numbers(v) => v[row],
            Column::Levels(v) => v[row] as f64,
        }
    }

    fn level(&self, input: usize, row: usize) -> usize {
        match &self.inputs[input] {
            Column::Levels(v) => v[row],
            Column::Numbers(v) => v[row] as usize,
        }
    }

    /// Row `row`'s non-zero design entries, as (column, value).
    fn fill(&self, layout: &RowLayout, row: usize, entries: &mut Vec<(usize, f64)>) {
        entries.clear();
        for (j, part) in layout.parts.iter().enumerate() {
            let value = match *part {
                Part::One => 1.0,
                Part::Indicator { input, level } => f64::from(u8::from(self.level(input, row) == level)),
                Part::Centred { input, centre } => self.number(input, row) - centre,
                Part::CentredAt { input, centre, by, level } => {
                    if self.level(by, row) == level {
                        self.number(input, row) - centre
                    } else {
                        0.0
                    }
                }
            };
            if value != 0.0 {
                entries.push((j, value));
            }
        }
    }
}

fn numbers(array: &ArrayRef) -> EngineResult<Vec<f64>> {
    let values = array.as_primitive_opt::<Float64Type>().ok_or_else(|| DataFusionError::Internal("a number column expected".into()))?;
    if values.null_count() > 0 {
        return Err(DataFusionError::Execution("a missing value reached a fit; add \"drop missing\" to the table cell".into()));
    }
    Ok(values.values().to_vec())
}

fn level_indices(array: &ArrayRef, column: &str, levels: &[String]) -> EngineResult<Vec<usize>> {
    let index: HashMap<&str, usize> = levels.iter().enumerate().map(|(k, l)| (l.as_str(), k)).collect();
    let text = array.as_string_opt::<i32>().ok_or_else(|| DataFusionError::Internal("a text column expected".into()))?;
    (0..text.len())
        .map(|i| {
            let value = if text.is_valid(i) { text.value(i) } else { "" };
            index.get(value).copied().ok_or_else(|| {
                DataFusionError::Execution(format!("column {column}: \"{value}\" is not one of its levels {}", levels.join(", ")))
            })
        })
        .collect()
}

/// What one row adds to the sums.
trait RowSums: Send + Sync + std::fmt::Debug + 'static {
    /// Length of the packed sums.
    fn length(&self) -> usize;
    fn add(&self, y: f64, entries: &[(usize, f64)], sums: &mut [f64]);
}

/// Normal family: `[n, ycᵀyc, Xᵀyc (p), column sums (p), non-zero rows (p), XᵀX (p·p)]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct CrossProducts {
    p: usize,
    #[serde(with = "exact")]
    y_centre: f64,
}

impl RowSums for CrossProducts {
    fn length(&self) -> usize {
        2 + 3 * self.p + self.p * self.p
    }

    fn add(&self, y: f64, entries: &[(usize, f64)], sums: &mut [f64]) {
        let p = self.p;
        let yc = y - self.y_centre;
        sums[0] += 1.0;
        sums[1] += yc * yc;
        let (xty, rest) = sums[2..].split_at_mut(p);
        let (column_sums, rest) = rest.split_at_mut(p);
        let (nonzero, xtx) = rest.split_at_mut(p);
        for &(j, v) in entries {
            xty[j] += v * yc;
            column_sums[j] += v;
            nonzero[j] += 1.0;
            let row = &mut xtx[j * p..(j + 1) * p];
            for &(k, w) in entries.iter().filter(|(k, _)| *k <= j) {
                row[k] += v * w;
            }
        }
    }
}

/// Bernoulli or poisson at `beta`: `[log-likelihood, gradient (p), information (p·p)]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct NewtonSums {
    #[serde(with = "exact_all")]
    beta: Vec<f64>,
    poisson: bool,
}

impl RowSums for NewtonSums {
    fn length(&self) -> usize {
        1 + self.beta.len() + self.beta.len() * self.beta.len()
    }

    fn add(&self, y: f64, entries: &[(usize, f64)], sums: &mut [f64]) {
        let p = self.beta.len();
        let eta: f64 = entries.iter().map(|&(j, v)| v * self.beta[j]).sum();
        let (log_likelihood, mean, weight) = if self.poisson {
            // −log y! is left out: it does not move the mode or the curvature.
            let mu = eta.exp();
            (y * eta - mu, mu, mu)
        } else {
            // log σ(η) and log(1 − σ(η)) without overflow.
            let softplus = if eta > 0.0 { eta + (-eta).exp().ln_1p() } else { eta.exp().ln_1p() };
            let mu = 1.0 / (1.0 + (-eta).exp());
            (y * eta - softplus, mu, mu * (1.0 - mu))
        };
        sums[0] += log_likelihood;
        let (gradient, information) = sums[1..].split_at_mut(p);
        for &(j, v) in entries {
            gradient[j] += v * (y - mean);
            let row = &mut information[j * p..(j + 1) * p];
            for &(k, w) in entries.iter().filter(|(k, _)| *k <= j) {
                row[k] += v * w * weight;
            }
        }
    }
}

/// The accumulator: packed sums, its state the sums as bytes.
#[derive(Debug)]
struct SumsAccumulator<S: RowSums> {
    layout: Arc<RowLayout>,
    rows: Arc<S>,
    sums: Vec<f64>,
    cancel: Arc<AtomicBool>,
}

impl<S: RowSums> Accumulator for SumsAccumulator<S> {
    fn update_batch(&mut self, values: &[ArrayRef]) -> EngineResult<()> {
        if self.cancel.load(Ordering::Relaxed) {
            return Err(DataFusionError::Execution(INTERRUPTED.into()));
        }
        let columns = Columns::read(&self.layout, values)?;
        let mut entries = Vec::with_capacity(self.layout.width());
        for (row, &y) in columns.outcome.iter().enumerate() {
            columns.fill(&self.layout, row, &mut entries);
            self.rows.add(y, &entries, &mut self.sums);
        }
        Ok(())
    }

    fn evaluate(&mut self) -> EngineResult<ScalarValue> {
        Ok(ScalarValue::Binary(Some(to_bytes(&self.sums))))
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self) + 8 * self.sums.capacity()
    }

    fn state(&mut self) -> EngineResult<Vec<ScalarValue>> {
        Ok(vec![ScalarValue::Binary(Some(to_bytes(&self.sums)))])
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> EngineResult<()> {
        let parts: &BinaryArray = states[0].as_binary::<i32>();
        for i in (0..parts.len()).filter(|&i| parts.is_valid(i)) {
            for (s, v) in self.sums.iter_mut().zip(from_bytes(parts.value(i))) {
                *s += v;
            }
        }
        Ok(())
    }
}

fn to_bytes(values: &[f64]) -> Vec<u8> {
    values.iter().flat_map(|v| v.to_le_bytes()).collect()
}

fn from_bytes(bytes: &[u8]) -> impl Iterator<Item = f64> + '_ {
    bytes.chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().expect("eight bytes")))
}

/// What one aggregate adds up.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
enum Gathered {
    CrossProducts(CrossProducts),
    NewtonSums(NewtonSums),
}

impl Gathered {
    fn name(&self) -> &'static str {
        match self {
            Gathered::CrossProducts(_) => CROSS_PRODUCTS,
            Gathered::NewtonSums(_) => NEWTON_SUMS,
        }
    }

    fn length(&self) -> usize {
        match self {
            Gathered::CrossProducts(rows) => rows.length(),
            Gathered::NewtonSums(rows) => rows.length(),
        }
    }
}

/// Everything an aggregate needs besides its arguments: what travels with
/// the plan to another machine.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct Settings {
    layout: RowLayout,
    gathered: Gathered,
    /// Per argument (outcome, then inputs): text, else a 64-bit float.
    text: Vec<bool>,
}

/// One of the two aggregates, with its settings. Two are the same function
/// when their settings are (the engine compares plans by it).
#[derive(Debug)]
pub(crate) struct DesignSums {
    settings: Settings,
    /// The settings as JSON: what the plan codecs carry.
    json: String,
    signature: Signature,
    /// Set when the run is interrupted; an aggregate rebuilt on another
    /// machine gets a flag of its own that nothing sets (the caller stops
    /// waiting instead).
    cancel: Arc<AtomicBool>,
}

impl PartialEq for DesignSums {
    fn eq(&self, other: &Self) -> bool {
        self.json == other.json
    }
}

impl Eq for DesignSums {}

impl Hash for DesignSums {
    fn hash<H: Hasher>(&self, state: &mut H) {
        self.json.hash(state);
    }
}

impl DesignSums {
    fn new(settings: Settings, cancel: Arc<AtomicBool>) -> DesignSums {
        let json = serde_json::to_string(&settings).expect("settings serialize");
        let types = settings.text.iter().map(|&text| if text { DataType::Utf8 } else { DataType::Float64 }).collect();
        DesignSums { settings, json, signature: Signature::exact(types, Volatility::Immutable), cancel }
    }

    /// The settings to carry in a plan.
    #[cfg(feature = "across_machines")]
    pub(crate) fn encode(&self) -> Vec<u8> {
        self.json.clone().into_bytes()
    }

    /// The aggregate `name` from carried settings; `Err` says what is wrong.
    #[cfg(feature = "across_machines")]
    pub(crate) fn decode(name: &str, bytes: &[u8]) -> Result<AggregateUDF, String> {
        let settings: Settings = serde_json::from_slice(bytes).map_err(|e| format!("the settings of {name} could not be read: {e}"))?;
        if settings.gathered.name() != name {
            return Err(format!("the settings carried for {name} are those of {}", settings.gathered.name()));
        }
        if settings.text.len() != 1 + settings.layout.inputs.len() {
            return Err(format!("the settings of {name} name {} arguments for {} inputs", settings.text.len(), settings.layout.inputs.len()));
        }
        Ok(AggregateUDF::from(DesignSums::new(settings, Arc::new(AtomicBool::new(false)))))
    }

    fn accumulator_of<S: RowSums + Clone>(&self, rows: &S) -> Box<dyn Accumulator> {
        Box::new(SumsAccumulator {
            layout: Arc::new(self.settings.layout.clone()),
            rows: Arc::new(rows.clone()),
            sums: vec![0.0; rows.length()],
            cancel: Arc::clone(&self.cancel),
        })
    }
}

impl AggregateUDFImpl for DesignSums {
    fn name(&self) -> &str {
        self.settings.gathered.name()
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn return_type(&self, _: &[DataType]) -> EngineResult<DataType> {
        Ok(DataType::Binary)
    }

    fn accumulator(&self, _: AccumulatorArgs<'_>) -> EngineResult<Box<dyn Accumulator>> {
        Ok(match &self.settings.gathered {
            Gathered::CrossProducts(rows) => self.accumulator_of(rows),
            Gathered::NewtonSums(rows) => self.accumulator_of(rows),
        })
    }
}

/// Runs one aggregate over the table's kept rows; the packed sums.
/// The accumulators read a flag of their own, which a watcher sets when
/// `cancel` is set (the engine's tasks outlive any borrow); across
/// machines the engine stops waiting when it is set.
fn gather(table: &DiskTable, outcome: &str, layout: &RowLayout, gathered: Gathered, cancel: &AtomicBool) -> Result<Vec<f64>, String> {
    let flag = Arc::new(AtomicBool::new(cancel.load(Ordering::Relaxed)));
    let done = AtomicBool::new(false);
    std::thread::scope(|scope| {
        scope.spawn(|| {
            while !done.load(Ordering::Relaxed) {
                if cancel.load(Ordering::Relaxed) {
                    flag.store(true, Ordering::Relaxed);
                }
                std::thread::sleep(std::time::Duration::from_millis(20));
            }
        });
        let result = run_aggregate(table, outcome, layout, gathered, &flag);
        done.store(true, Ordering::Relaxed);
        result
    })
}

fn run_aggregate(table: &DiskTable, outcome: &str, layout: &RowLayout, gathered: Gathered, cancel: &Arc<AtomicBool>) -> Result<Vec<f64>, String> {
    let (arguments, text) = layout.arguments(table, outcome)?;
    let length = gathered.length();
    let function = AggregateUDF::from(DesignSums::new(Settings { layout: layout.clone(), gathered, text }, Arc::clone(cancel)));
    let frame = table.frame.clone().aggregate(vec![], vec![function.call(arguments).alias("sums")]).map_err(|e| e.to_string())?;
    let batches = table.engine.collect_until(frame, cancel).map_err(|e| {
        let text = e.to_string();
        if text.contains(INTERRUPTED) { INTERRUPTED.to_string() } else { text }
    })?;
    let batch = batches.iter().find(|b| b.num_rows() > 0).ok_or("the engine returned no sums")?;
    let packed = batch.column(0).as_binary::<i32>();
    let sums: Vec<f64> = if packed.is_valid(0) { from_bytes(packed.value(0)).collect() } else { vec![0.0; length] };
    if sums.len() != length {
        return Err(format!("the engine returned {} sums where {length} were expected", sums.len()));
    }
    Ok(sums)
}

/// The normal family's sufficient statistics over a table on disk.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct CrossSums {
    pub n: f64,
    pub yty: f64,
    pub xty: Vec<f64>,
    pub column_sums: Vec<f64>,
    pub nonzero: Vec<usize>,
    /// `XᵀX`, row-major, both triangles filled.
    pub xtx: Vec<f64>,
}

/// One pass of `waypath_cross_products`, the outcome centred at `y_centre`.
pub(crate) fn cross_products(
    table: &DiskTable,
    outcome: &str,
    layout: &RowLayout,
    y_centre: f64,
    cancel: &AtomicBool,
) -> Result<CrossSums, String> {
    let p = layout.width();
    let sums = gather(table, outcome, layout, Gathered::CrossProducts(CrossProducts { p, y_centre }), cancel)?;
    let mut xtx = sums[2 + 3 * p..].to_vec();
    mirror(&mut xtx, p);
    Ok(CrossSums {
        n: sums[0],
        yty: sums[1],
        xty: sums[2..2 + p].to_vec(),
        column_sums: sums[2 + p..2 + 2 * p].to_vec(),
        nonzero: sums[2 + 2 * p..2 + 3 * p].iter().map(|&c| c as usize).collect(),
        xtx,
    })
}

/// Log-likelihood, gradient and information of a bernoulli or poisson
/// outcome at `beta`: one pass of `waypath_newton_sums`.
pub(crate) fn newton_sums(
    table: &DiskTable,
    outcome: &str,
    layout: &RowLayout,
    family: &Family,
    beta: &[f64],
    cancel: &AtomicBool,
) -> Result<(f64, Vec<f64>, Vec<f64>), String> {
    let p = beta.len();
    let rows = NewtonSums { beta: beta.to_vec(), poisson: *family == Family::Poisson };
    let sums = gather(table, outcome, layout, Gathered::NewtonSums(rows), cancel)?;
    let mut information = sums[1 + p..].to_vec();
    mirror(&mut information, p);
    Ok((sums[0], sums[1..1 + p].to_vec(), information))
}

/// Fills the upper triangle of a row-major square from its lower one.
fn mirror(square: &mut [f64], p: usize) {
    for j in 0..p {
        for k in 0..j {
            square[k * p + j] = square[j * p + k];
        }
    }
}
