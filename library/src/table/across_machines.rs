//! Tables on disk whose passes run across machines (cargo feature
//! `across_machines`, body line `stay on disk across machines at HOST:PORT`):
//! the same engine plans as [`super::on_disk`], handed to an Apache Ballista
//! scheduler, which splits them into tasks for its executors and gathers
//! the partial sums.
//!
//! Why Ballista: it is DataFusion's own distributed scheduler, so a plan
//! the embedded engine runs is a plan it runs, with no second planner to
//! keep in step. The plans carry the two aggregates of `model::disk_sums`
//! with their settings through the plan codecs given here ([`PlanCodecs`],
//! made by `model::plan_codec`); a scheduler and executors that know the
//! same codecs (the `waypath-machines` binary) rebuild them.
//!
//! What this module adds to the embedded engine: a check that a scheduler
//! answers at the address before anything is planned (a clear error, not a
//! wait), the session that sends plans there, and a wait for results that
//! an interrupt ends. Every executor must see the Parquet file or folder
//! at the same path as the notebook (a shared or copied folder).

use std::future::Future;
use std::net::{TcpStream, ToSocketAddrs};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use ballista_core::extension::{SessionConfigExt, SessionStateExt};
use datafusion::error::{DataFusionError, Result as EngineResult};
use datafusion::execution::session_state::SessionStateBuilder;
use datafusion::execution::context::SessionContext;
use datafusion::prelude::SessionConfig;
use datafusion_proto::logical_plan::LogicalExtensionCodec;
use datafusion_proto::physical_plan::PhysicalExtensionCodec;

use super::error::TableError;
use super::on_disk::INTERRUPTED;

/// The cargo feature of tables whose passes run across machines.
pub const FEATURE: &str = "across_machines";

/// How long a scheduler has to accept a connection before the table is
/// refused.
pub const ANSWER_WITHIN: Duration = Duration::from_secs(5);

/// Partitions a plan's scan is split into: the tasks the executors share
/// (a file or row-group range each), so that several executors get work.
pub const SCAN_PARTITIONS: usize = 8;

/// How often a wait for results looks at the cancel flag.
const CANCEL_POLL: Duration = Duration::from_millis(50);

/// The codecs that carry Waypath's aggregates in a plan (made by
/// `model::plan_codec::plan_codecs`).
#[derive(Debug, Clone)]
pub struct PlanCodecs {
    pub logical: Arc<dyn LogicalExtensionCodec>,
    pub physical: Arc<dyn PhysicalExtensionCodec>,
}

fn refused(label: &str, problem: String) -> TableError {
    TableError::Columnar { file: label.into(), problem: problem.into() }
}

/// `Ok` when something accepts a connection at `scheduler` within
/// [`ANSWER_WITHIN`]; else the error names the address and what to do.
pub fn check_answers(scheduler: &str, label: &str) -> Result<(), TableError> {
    let addresses: Vec<_> = scheduler
        .to_socket_addrs()
        .map_err(|e| refused(label, format!("the scheduler address {scheduler} could not be resolved: {e}")))?
        .collect();
    let mut last = None;
    for address in &addresses {
        match TcpStream::connect_timeout(address, ANSWER_WITHIN) {
            Ok(_) => return Ok(()),
            Err(e) => last = Some(e),
        }
    }
    let why = last.map_or_else(|| "the name gave no address".to_string(), |e| e.to_string());
    Err(refused(
        label,
        format!(
            "no scheduler answered at {scheduler} within {} s ({why}); start one there (waypath-machines scheduler \
             --port PORT) with executors, or write \"stay on disk\" alone to run the engine on this machine",
            ANSWER_WITHIN.as_secs()
        ),
    ))
}

/// The runtime and the session whose plans run on the scheduler at
/// `scheduler`, which was checked to answer.
pub(super) fn remote_engine(
    scheduler: &str,
    codecs: &PlanCodecs,
    label: &str,
) -> Result<(tokio::runtime::Runtime, SessionContext), TableError> {
    check_answers(scheduler, label)?;
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .map_err(|e| refused(label, format!("the engine could not start: {e}")))?;
    let config = SessionConfig::new()
        .with_target_partitions(SCAN_PARTITIONS)
        .with_batch_size(8192)
        .with_ballista_logical_extension_codec(Arc::clone(&codecs.logical))
        .with_ballista_physical_extension_codec(Arc::clone(&codecs.physical));
    let state = SessionStateBuilder::new().with_config(config).with_default_features().build();
    let state = state
        .upgrade_for_ballista(format!("http://{scheduler}"))
        .map_err(|e| refused(label, format!("the session for the scheduler at {scheduler} could not be made: {e}")))?;
    Ok((runtime, SessionContext::new_with_state(state)))
}

/// Waits for `work`, giving up with the interrupt's error once `cancel` is
/// set. The scheduler is not told: tasks already running finish on their
/// executors and their results are dropped.
pub(super) async fn until_cancelled<T>(work: impl Future<Output = EngineResult<T>>, cancel: &AtomicBool) -> EngineResult<T> {
    let mut work = std::pin::pin!(work);
    loop {
        match tokio::time::timeout(CANCEL_POLL, &mut work).await {
            Ok(result) => return result,
            Err(_) if cancel.load(Ordering::Relaxed) => return Err(DataFusionError::Execution(INTERRUPTED.into())),
            Err(_) => {}
        }
    }
}
