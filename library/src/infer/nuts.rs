//! The No-U-Turn sampler over several chains.
//!
//! This module owns the *run*: starting points, one seeded random stream per
//! chain, chains spread over threads, cancellation, progress reports and the
//! per-chain counts (divergences, tree-depth hits) a scientist must see. The
//! transition itself — multinomial NUTS with the generalised U-turn check,
//! dual-averaging step size and a mass matrix adapted during settling in,
//! on the `nuts-rs` schedule (from draw and gradient variances, not fixed
//! doubling windows), diagonal or diagonal plus a low-rank correction
//! ([`MassMatrix`]) — comes from the `nuts-rs` crate, driven one draw at a
//! time so that the cancel flag is seen between draws and each chain runs
//! on a thread of ours.
//!
//! Each chain's random stream is derived from `(seed, chain)` alone, so the
//! same seed gives the same draws whatever the number of threads.

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use nuts_rs::{
    Chain, CpuLogpFunc, CpuMath, CpuMathError, DiagNutsSettings, HasDims, LogpError, LowRankNutsSettings, Settings,
};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};

use crate::model::LogDensity;

/// Settings of a NUTS run. [`Default`] gives Waypath's defaults, chosen
/// from the measurements in the README's Performance section: [`CHAINS`]
/// chains that each settle for [`SETTLE`] iterations and then keep
/// [`DRAWS`] draws, step size tuned to acceptance [`ACCEPTANCE`],
/// trajectories doubled at most [`DOUBLINGS`] times, seed 20_240_613,
/// all cores, and the mass matrix chosen per model.
#[derive(Debug, Clone, PartialEq)]
pub struct NutsSettings {
    /// Number of independent chains.
    pub chains: usize,
    /// Iterations per chain spent settling in (step size and mass matrix
    /// adapted, the start forgotten) before draws are kept; not returned.
    pub settle: usize,
    /// Kept draws per chain.
    pub draws: usize,
    /// Mean acceptance statistic the step size is tuned to reach, in (0, 1).
    pub acceptance: f64,
    /// How many times a trajectory may double (the NUTS tree depth); a
    /// trajectory has at most `2^doublings - 1` steps.
    pub doublings: u32,
    /// Seed of every random choice in the run.
    pub seed: u64,
    /// Threads to spread the chains over; 0 means one per available core.
    pub threads: usize,
    /// How the mass matrix is adapted while settling.
    pub mass: MassMatrix,
}

/// The mass matrix NUTS adapts while settling (the shape of the momentum
/// distribution, matched to the posterior's scales and correlations).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MassMatrix {
    /// Chosen for each model when it is fitted (`infer::fit`, the rule
    /// there); a target that is not a model gets [`MassMatrix::Diagonal`].
    ByModel,
    /// One scale per parameter: cheap, and all a posterior with little
    /// correlation between parameters needs.
    Diagonal,
    /// The diagonal scales plus a correction along the few directions where
    /// the draws' covariance and the gradients' disagree most with them
    /// (`nuts-rs`'s low-rank adaptation): for correlated parameters.
    LowRank,
}

/// The words of the `mass` option of `fit … with nuts`.
pub const MASS_WORDS: &[&str] = &["diagonal", "low-rank"];

impl MassMatrix {
    /// Read a `mass` option value ([`MASS_WORDS`]).
    pub fn from_word(word: &str) -> Option<MassMatrix> {
        match word {
            "diagonal" => Some(MassMatrix::Diagonal),
            "low-rank" => Some(MassMatrix::LowRank),
            _ => None,
        }
    }

    /// The value's word ([`MASS_WORDS`]), or "chosen per model".
    pub fn word(self) -> &'static str {
        match self {
            MassMatrix::ByModel => "chosen per model",
            MassMatrix::Diagonal => MASS_WORDS[0],
            MassMatrix::LowRank => MASS_WORDS[1],
        }
    }
}

impl Default for NutsSettings {
    fn default() -> Self {
        NutsSettings {
            chains: CHAINS,
            settle: SETTLE,
            draws: DRAWS,
            acceptance: ACCEPTANCE,
            doublings: DOUBLINGS,
            seed: 20_240_613,
            threads: 0,
            mass: MassMatrix::ByModel,
        }
    }
}

// Waypath's defaults, measured with the engine benchmark (README,
// Performance). The B-spline case binds: its effective draws per kept draw
// are about 0.1 whatever the acceptance or the settling length, so it needs
// about 8000 kept draws for R-hat ≤ 1.01 and bulk and tail ESS ≥ 400 on
// every one of 20 seeds (4 × 1000 met them on 12 of 20); settling beyond
// 400 iterations changed nothing there; acceptance 0.85 gave the most ESS
// per CPU second on the logistic case without a divergence anywhere; the
// deepest trajectory of any case was 7 doublings, so 12 leaves a factor 32.

/// Default number of chains (even, so two cores finish together).
pub const CHAINS: usize = 4;
/// Default settling iterations per chain.
pub const SETTLE: usize = 400;
/// Default kept draws per chain.
pub const DRAWS: usize = 2000;
/// Default acceptance the step size is tuned to.
pub const ACCEPTANCE: f64 = 0.85;
/// Default limit on trajectory doublings.
pub const DOUBLINGS: u32 = 12;

/// Where chains start.
#[derive(Debug, Clone, PartialEq)]
pub enum Init {
    /// Each coordinate drawn uniformly from `(-radius, radius)` on the
    /// unconstrained scale, from the chain's own seeded stream; redrawn
    /// (up to 100 times) while the log density is not finite there.
    Random { radius: f64 },
    /// One starting point per chain, on the unconstrained scale.
    Given(Vec<Vec<f64>>),
}

impl Default for Init {
    fn default() -> Self {
        Init::Random { radius: 2.0 }
    }
}

/// One progress report: the chain with index `chain` (counted from 0) has
/// finished `iteration` of its `total` iterations (settling included).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Progress {
    pub chain: usize,
    pub iteration: usize,
    pub total: usize,
}

/// The outcome of a NUTS run.
#[derive(Debug, Clone, PartialEq)]
pub struct NutsRun {
    /// Kept draws, `[chain][draw][parameter]`, on the unconstrained scale.
    pub draws: Vec<Vec<Vec<f64>>>,
    /// Divergent transitions (energy error above 1000) among kept draws, per chain.
    pub divergences: Vec<usize>,
    /// Kept draws whose trajectory reached the doubling limit, per chain.
    pub depth_hits: Vec<usize>,
    /// The most doublings any kept draw's trajectory made, per chain.
    pub deepest: Vec<u32>,
    /// Adapted step size of each chain.
    pub step_sizes: Vec<f64>,
    /// Leapfrog steps (gradient evaluations) of the kept draws, per chain.
    pub leapfrog_steps: Vec<u64>,
    /// Wall-clock time of the run.
    pub seconds: f64,
}

/// Why a NUTS run gave no draws. Chains are numbered from 1 in these errors.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum NutsError {
    #[error("the sampler settings are not usable: {0}")]
    Settings(String),
    #[error("starting point of chain {chain} has {got} values but the model has {expected} parameters; give one value per parameter")]
    InitLength { chain: usize, expected: usize, got: usize },
    #[error("the log density is not finite at the starting point of chain {chain}; give a starting point inside the support or check the priors")]
    InitNotFinite { chain: usize },
    #[error("the run was cancelled before it finished")]
    Cancelled,
    #[error("chain {chain} stopped: {message}")]
    Chain { chain: usize, message: String },
}

/// The divergence threshold: a trajectory whose energy error exceeds this is
/// counted as divergent.
pub const DIVERGENCE_ENERGY: f64 = 1000.0;

/// Run NUTS on `target` and return the kept draws of every chain.
///
/// `cancel` is read between draws: once it is set the run stops within one
/// trajectory and returns [`NutsError::Cancelled`]. `progress` is called
/// after every iteration of every chain, from the chain's thread.
pub fn sample_nuts<D: LogDensity>(
    target: &D,
    init: &Init,
    settings: &NutsSettings,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<NutsRun, NutsError> {
    check_settings(settings)?;
    let start = Instant::now();
    let starts = starting_points(target, init, settings)?;
    let threads = thread_count(settings);
    let next_chain = AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<Result<ChainRun, NutsError>>>> =
        (0..settings.chains).map(|_| Mutex::new(None)).collect();

    std::thread::scope(|scope| {
        for _ in 0..threads {
            scope.spawn(|| loop {
                let chain = next_chain.fetch_add(1, Ordering::SeqCst);
                if chain >= settings.chains {
                    break;
                }
                let run = run_chain(target, chain, &starts[chain], settings, cancel, progress);
                if let Ok(mut slot) = slots[chain].lock() {
                    *slot = Some(run);
                }
            });
        }
    });

    let mut out = NutsRun {
        draws: Vec::with_capacity(settings.chains),
        divergences: Vec::with_capacity(settings.chains),
        depth_hits: Vec::with_capacity(settings.chains),
        deepest: Vec::with_capacity(settings.chains),
        step_sizes: Vec::with_capacity(settings.chains),
        leapfrog_steps: Vec::with_capacity(settings.chains),
        seconds: 0.0,
    };
    for (chain, slot) in slots.into_iter().enumerate() {
        let lost = || NutsError::Chain { chain: chain + 1, message: "its thread ended without a result".into() };
        let run = slot.into_inner().map_err(|_| lost())?.ok_or_else(lost)??;
        out.draws.push(run.draws);
        out.divergences.push(run.divergences);
        out.depth_hits.push(run.depth_hits);
        out.deepest.push(run.deepest);
        out.step_sizes.push(run.step_size);
        out.leapfrog_steps.push(run.steps);
    }
    out.seconds = start.elapsed().as_secs_f64();
    Ok(out)
}

fn check_settings(settings: &NutsSettings) -> Result<(), NutsError> {
    if settings.chains == 0 || settings.draws == 0 {
        return Err(NutsError::Settings("ask for at least one chain and one draw".into()));
    }
    if !(settings.acceptance > 0.0 && settings.acceptance < 1.0) {
        return Err(NutsError::Settings(format!(
            "acceptance {} must lie strictly between 0 and 1",
            settings.acceptance
        )));
    }
    if settings.doublings == 0 || settings.doublings > 30 {
        return Err(NutsError::Settings(format!(
            "doublings {} must be between 1 and 30",
            settings.doublings
        )));
    }
    Ok(())
}

fn thread_count(settings: &NutsSettings) -> usize {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let wanted = if settings.threads == 0 { cores } else { settings.threads };
    wanted.clamp(1, settings.chains)
}

/// The seeded random stream of one chain: SplitMix64 of the run seed mixed
/// with the chain number, so streams differ between chains and never depend
/// on which thread runs them.
fn chain_rng(seed: u64, chain: usize) -> StdRng {
    let mut z = seed ^ (chain as u64).wrapping_add(1).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    StdRng::seed_from_u64(z ^ (z >> 31))
}

fn starting_points<D: LogDensity>(
    target: &D,
    init: &Init,
    settings: &NutsSettings,
) -> Result<Vec<Vec<f64>>, NutsError> {
    let dim = target.dim();
    let mut grad = vec![0.0; dim];
    let finite = |x: &[f64], grad: &mut [f64]| target.log_density_and_gradient(x, grad).is_finite();
    match init {
        Init::Given(points) => {
            if points.len() != settings.chains {
                return Err(NutsError::Settings(format!(
                    "{} starting points given for {} chains; give one per chain",
                    points.len(),
                    settings.chains
                )));
            }
            for (chain, x) in points.iter().enumerate() {
                if x.len() != dim {
                    return Err(NutsError::InitLength { chain: chain + 1, expected: dim, got: x.len() });
                }
                if !finite(x, &mut grad) {
                    return Err(NutsError::InitNotFinite { chain: chain + 1 });
                }
            }
            Ok(points.clone())
        }
        Init::Random { radius } => (0..settings.chains)
            .map(|chain| {
                // A stream apart from the transition stream of the same chain.
                let mut rng = chain_rng(settings.seed ^ 0xA5A5_A5A5_A5A5_A5A5, chain);
                for _ in 0..100 {
                    let x: Vec<f64> =
                        (0..dim).map(|_| radius * (2.0 * rng.random::<f64>() - 1.0)).collect();
                    if finite(&x, &mut grad) {
                        return Ok(x);
                    }
                }
                Err(NutsError::InitNotFinite { chain: chain + 1 })
            })
            .collect(),
    }
}

/// What one chain hands back.
struct ChainRun {
    draws: Vec<Vec<f64>>,
    divergences: usize,
    depth_hits: usize,
    deepest: u32,
    step_size: f64,
    steps: u64,
}

fn run_chain<D: LogDensity>(
    target: &D,
    chain: usize,
    start: &[f64],
    settings: &NutsSettings,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<ChainRun, NutsError> {
    let failed = |message: String| NutsError::Chain { chain: chain + 1, message };
    let total = settings.settle + settings.draws;
    let mut rng = chain_rng(settings.seed, chain);
    let math = CpuMath::new(DensityAdapter { target });
    let mut draw: Box<dyn FnMut() -> Result<(Box<[f64]>, nuts_rs::Progress), String> + '_> = match settings.mass {
        MassMatrix::LowRank => {
            start_chain(with_settings(LowRankNutsSettings::default(), settings), math, chain, start, &mut rng)
        }
        MassMatrix::Diagonal | MassMatrix::ByModel => {
            start_chain(with_settings(DiagNutsSettings::default(), settings), math, chain, start, &mut rng)
        }
    }
    .map_err(failed)?;
    let iterations = (0..total).map(|_| draw());

    let full_depth_steps = (1u64 << settings.doublings) - 1;
    let mut run = ChainRun {
        draws: Vec::with_capacity(settings.draws.min(10_000)),
        divergences: 0,
        depth_hits: 0,
        deepest: 0,
        step_size: f64::NAN,
        steps: 0,
    };
    for (iteration, step) in iterations.enumerate() {
        if cancel.load(Ordering::Relaxed) {
            return Err(NutsError::Cancelled);
        }
        let (position, info) = step.map_err(|e| failed(e.to_string()))?;
        if iteration >= settings.settle {
            run.draws.push(position.into_vec());
            run.divergences += usize::from(info.diverging);
            run.depth_hits += usize::from(info.num_steps >= full_depth_steps);
            run.deepest = run.deepest.max(doublings_of(info.num_steps));
            run.step_size = info.step_size;
            run.steps += info.num_steps;
        }
        progress(Progress { chain, iteration: iteration + 1, total });
    }
    Ok(run)
}

/// `nuts-rs` settings of one kind (diagonal or low-rank adaptation, with
/// that kind's own adaptation defaults) carrying Waypath's run settings.
fn with_settings<A: std::fmt::Debug + Copy + Default + serde::Serialize>(
    mut options: nuts_rs::NutsSettings<A>,
    settings: &NutsSettings,
) -> nuts_rs::NutsSettings<A>
where
    nuts_rs::NutsSettings<A>: HasStepSize,
{
    options.num_tune = settings.settle as u64;
    options.num_draws = settings.draws as u64;
    options.maxdepth = u64::from(settings.doublings);
    options.max_energy_error = DIVERGENCE_ENERGY;
    options.num_chains = settings.chains;
    options.seed = settings.seed;
    options.set_target_acceptance(settings.acceptance);
    options
}

/// The step-size target of either kind of `nuts-rs` settings.
trait HasStepSize {
    fn set_target_acceptance(&mut self, acceptance: f64);
}

impl HasStepSize for DiagNutsSettings {
    fn set_target_acceptance(&mut self, acceptance: f64) {
        self.adapt_options.step_size_settings.target_accept = acceptance;
    }
}

impl HasStepSize for LowRankNutsSettings {
    fn set_target_acceptance(&mut self, acceptance: f64) {
        self.adapt_options.step_size_settings.target_accept = acceptance;
    }
}

/// A chain of the given `nuts-rs` settings, placed at `start`, as a
/// function that makes the next draw.
fn start_chain<'a, S: Settings, R: rand::Rng + ?Sized>(
    options: S,
    math: CpuMath<DensityAdapter<'a, impl LogDensity>>,
    chain: usize,
    start: &[f64],
    rng: &mut R,
) -> Result<Box<dyn FnMut() -> Result<(Box<[f64]>, nuts_rs::Progress), String> + 'a>, String> {
    let mut sampler = options.new_chain(chain as u64, math, rng).map_err(|e| e.to_string())?;
    sampler.set_position(start).map_err(|e| e.to_string())?;
    Ok(Box::new(move || sampler.draw().map_err(|e| e.to_string())))
}

/// The doublings a trajectory of `steps` leapfrog steps made: a tree after
/// `d` doublings has at most `2^d - 1` steps, so `d` is the bit length of
/// `steps`.
fn doublings_of(steps: u64) -> u32 {
    u64::BITS - steps.leading_zeros()
}

/// Presents a [`LogDensity`] to `nuts-rs`.
struct DensityAdapter<'a, D> {
    target: &'a D,
}

/// A point where the log density is not finite; `nuts-rs` treats it as a
/// divergence and rejects the trajectory.
#[derive(Debug, thiserror::Error)]
#[error("the log density is not finite at this point")]
struct NotFinite;

impl LogpError for NotFinite {
    fn is_recoverable(&self) -> bool {
        true
    }
}

impl<D: LogDensity> HasDims for DensityAdapter<'_, D> {
    fn dim_sizes(&self) -> std::collections::HashMap<String, u64> {
        let dim = self.target.dim() as u64;
        [("unconstrained_parameter".to_string(), dim), ("dim".to_string(), dim)].into()
    }
}

impl<D: LogDensity> CpuLogpFunc for DensityAdapter<'_, D> {
    type LogpError = NotFinite;
    type FlowParameters = ();
    type ExpandedVector = Vec<f64>;

    fn dim(&self) -> usize {
        self.target.dim()
    }

    fn logp(&mut self, position: &[f64], gradient: &mut [f64]) -> Result<f64, NotFinite> {
        let value = self.target.log_density_and_gradient(position, gradient);
        if value.is_finite() && gradient.iter().all(|g| g.is_finite()) {
            Ok(value)
        } else {
            Err(NotFinite)
        }
    }

    fn expand_vector<R: rand::Rng + ?Sized>(
        &mut self,
        _rng: &mut R,
        array: &[f64],
    ) -> Result<Vec<f64>, CpuMathError> {
        Ok(array.to_vec())
    }
}
