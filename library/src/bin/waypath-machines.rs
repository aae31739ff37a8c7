//! `waypath-machines`: an Apache Ballista scheduler or executor that knows
//! Waypath's aggregates (cargo feature `across_machines`).
//!
//! A table written `stay on disk across machines at HOST:PORT` sends its
//! plans to the scheduler at that address; the scheduler splits them into
//! tasks and its executors run them. Both must decode the two aggregates'
//! settings from the plan, which Ballista's own binaries cannot, so this
//! one starts either with Waypath's plan codecs:
//!
//! ```text
//! waypath-machines scheduler [--bind HOST] [--port PORT]
//! waypath-machines executor --scheduler HOST:PORT [--bind HOST] [--port PORT]
//!                           [--grpc-port PORT] [--slots N] [--work-folder DIR]
//! ```
//!
//! Each process runs until it is stopped. Every executor must see the
//! Parquet files at the path the notebook names.

use std::collections::HashMap;
use std::net::SocketAddr;
use std::process::ExitCode;
use std::sync::Arc;

use ballista_executor::executor_process::{start_executor_process, ExecutorProcessConfig};
use ballista_scheduler::cluster::BallistaCluster;
use ballista_scheduler::config::SchedulerConfig;
use ballista_scheduler::scheduler_process::start_server;
use waypath::model::plan_codec::plan_codecs;

const USAGE: &str = "usage:
  waypath-machines scheduler [--bind HOST] [--port PORT]
      (defaults: --bind 127.0.0.1 --port 50050)
  waypath-machines executor --scheduler HOST:PORT [--bind HOST] [--port PORT] [--grpc-port PORT]
                            [--slots N] [--work-folder DIR]
      (defaults: --bind 127.0.0.1 --port 50051 --grpc-port 50052 --slots 1,
       the work folder a new one under the temporary folder)";

fn main() -> ExitCode {
    let arguments: Vec<String> = std::env::args().skip(1).collect();
    let result = match arguments.split_first() {
        Some((role, rest)) if role == "scheduler" => options(rest, &["--bind", "--port"]).and_then(|o| scheduler(&o)),
        Some((role, rest)) if role == "executor" => {
            options(rest, &["--scheduler", "--bind", "--port", "--grpc-port", "--slots", "--work-folder"]).and_then(|o| executor(&o))
        }
        _ => Err(format!("say which to start, scheduler or executor\n{USAGE}")),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(problem) => {
            eprintln!("waypath-machines: {problem}");
            ExitCode::FAILURE
        }
    }
}

/// `--name value` pairs, each name one of `known`, none twice.
fn options(words: &[String], known: &[&str]) -> Result<HashMap<String, String>, String> {
    let mut found = HashMap::new();
    let mut rest = words.iter();
    while let Some(name) = rest.next() {
        if !known.contains(&name.as_str()) {
            return Err(format!("unknown option {name} (this role takes {})\n{USAGE}", known.join(", ")));
        }
        let value = rest.next().ok_or_else(|| format!("{name} needs a value\n{USAGE}"))?;
        if found.insert(name.clone(), value.clone()).is_some() {
            return Err(format!("{name} is given twice"));
        }
    }
    Ok(found)
}

fn read_port(options: &HashMap<String, String>, name: &str, default: u16) -> Result<u16, String> {
    options.get(name).map_or(Ok(default), |v| match v.parse::<u16>() {
        Ok(p) if p > 0 => Ok(p),
        _ => Err(format!("{name} {v}: a port is a whole number from 1 to 65535")),
    })
}

fn runtime() -> Result<tokio::runtime::Runtime, String> {
    tokio::runtime::Builder::new_multi_thread().enable_all().build().map_err(|e| format!("the runtime could not start: {e}"))
}

fn scheduler(options: &HashMap<String, String>) -> Result<(), String> {
    let host = options.get("--bind").cloned().unwrap_or_else(|| "127.0.0.1".into());
    let port = read_port(options, "--port", 50050)?;
    let address: SocketAddr = format!("{host}:{port}").parse().map_err(|e| format!("--bind {host}: not an IP address ({e})"))?;
    let codecs = plan_codecs();
    let mut config = SchedulerConfig::default().with_hostname(host.clone()).with_port(port);
    config.bind_host = host;
    config.override_logical_codec = Some(codecs.logical);
    config.override_physical_codec = Some(codecs.physical);
    runtime()?.block_on(async {
        let cluster = BallistaCluster::new_from_config(&config).await.map_err(|e| e.to_string())?;
        println!("waypath-machines: scheduler listening on {address}");
        start_server(cluster, address, Arc::new(config)).await.map_err(|e| format!("the scheduler stopped: {e}"))
    })
}

fn executor(options: &HashMap<String, String>) -> Result<(), String> {
    let scheduler = options.get("--scheduler").ok_or_else(|| format!("an executor needs --scheduler HOST:PORT\n{USAGE}"))?;
    let (scheduler_host, scheduler_port) =
        scheduler.rsplit_once(':').ok_or_else(|| format!("--scheduler {scheduler}: write HOST:PORT"))?;
    let scheduler_port: u16 = scheduler_port.parse().map_err(|_| format!("--scheduler {scheduler}: {scheduler_port} is not a port"))?;
    let host = options.get("--bind").cloned().unwrap_or_else(|| "127.0.0.1".into());
    let port = read_port(options, "--port", 50051)?;
    let grpc_port = read_port(options, "--grpc-port", 50052)?;
    let slots = match options.get("--slots") {
        None => 1,
        Some(v) => v.parse::<usize>().ok().filter(|&n| n > 0).ok_or_else(|| format!("--slots {v}: a whole number of at least 1"))?,
    };
    let work = match options.get("--work-folder") {
        Some(folder) => std::path::PathBuf::from(folder),
        None => std::env::temp_dir().join(format!("waypath-machines-executor-{port}")),
    };
    std::fs::create_dir_all(&work).map_err(|e| format!("--work-folder {}: {e}", work.display()))?;
    let codecs = plan_codecs();
    let config = ExecutorProcessConfig {
        bind_host: host.clone(),
        external_host: Some(host.clone()),
        port,
        grpc_port,
        scheduler_host: scheduler_host.to_string(),
        scheduler_port,
        vcores: slots,
        work_dir: Some(work.display().to_string()),
        override_logical_codec: Some(codecs.logical),
        override_physical_codec: Some(codecs.physical),
        ..ExecutorProcessConfig::default()
    };
    runtime()?.block_on(async {
        println!("waypath-machines: executor on {host}:{port} (tasks on {grpc_port}), scheduler {scheduler}, {slots} slots");
        start_executor_process(Arc::new(config)).await.map_err(|e| format!("the executor stopped: {e}"))
    })
}
