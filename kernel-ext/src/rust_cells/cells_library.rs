//! The prebuilt library that `%%rust` cells link to, and the runner program.
//!
//! The library of package `waypath-rust-host` (crate `waypath_cells`: the
//! library re-exported, plus the bridge) is linked as a Rust dynamic
//! library by `cargo rustc -p waypath-rust-host --lib --crate-type dylib --
//! -C prefer-dynamic` in the workspace this program was built from, into the
//! same target folder and profile, with the workspace's `Cargo.lock`
//! (`--locked`). Selecting the runner's own package gives the same feature
//! resolution as the build that made the runner, so every dependency is
//! reused: the one-time work is a link, and an unchanged build is a check of
//! a second or two. Cargo runs offline first; when a package is missing it
//! tries the network once, and when that fails too the error names the
//! command to run.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The dynamic library, the folder of the libraries it was built from, and
/// the toolchain's `libstd` folder.
pub struct CellsLibrary {
    pub dylib: PathBuf,
    pub deps: PathBuf,
    pub std_dir: Option<PathBuf>,
}

impl CellsLibrary {
    /// `LD_LIBRARY_PATH` for the runner and the process that runs cells:
    /// the library's folder and `libstd`'s, before any existing entries.
    pub fn search_path(&self) -> String {
        let mut dirs: Vec<String> = Vec::new();
        if let Some(dir) = self.dylib.parent() {
            dirs.push(dir.display().to_string());
        }
        if let Some(dir) = &self.std_dir {
            dirs.push(dir.display().to_string());
        }
        if let Ok(old) = std::env::var("LD_LIBRARY_PATH") {
            dirs.extend(old.split(':').filter(|d| !d.is_empty()).map(str::to_string));
        }
        dirs.join(":")
    }
}

/// Where this program's build lives: the workspace, the target folder and
/// the profile (`release` or `debug`), taken from this program's own path
/// (`TARGET/PROFILE/waypath`) unless `WAYPATH_CELLS_TARGET_DIR` says otherwise.
struct BuildPlace {
    workspace: PathBuf,
    target: PathBuf,
    profile: String,
}

fn build_place() -> Result<BuildPlace, String> {
    let exe = std::env::current_exe().map_err(|e| format!("cannot find the waypath program: {e}"))?;
    let profile_dir = exe.parent().ok_or("the waypath program has no folder")?;
    let profile = profile_dir.file_name().and_then(|n| n.to_str()).unwrap_or("release");
    let profile = if profile == "deps" { "debug" } else { profile }.to_string();
    let exe_target = if profile_dir.ends_with("deps") { profile_dir.parent().and_then(Path::parent) } else { profile_dir.parent() };
    let target = match std::env::var_os("WAYPATH_CELLS_TARGET_DIR") {
        Some(dir) => PathBuf::from(dir),
        None => exe_target.ok_or("the waypath program is not inside a cargo target folder")?.to_path_buf(),
    };
    let workspace = workspace_root()?;
    Ok(BuildPlace { workspace, target, profile })
}

/// The Waypath workspace whose `waypath-rust-host` the cells link to: the
/// first of `$WAYPATH_CELLS_WORKSPACE`, the `CARGO_MANIFEST_DIR` that
/// `cargo run` and `cargo test` hand this process, and the folder this
/// program was compiled in, that lies in a workspace holding the runner's
/// package. A binary built in one clone and reused by cargo in another
/// (same sources, same target folder) would otherwise link against a
/// folder that may be gone or hold other sources.
fn workspace_root() -> Result<PathBuf, String> {
    let candidates: Vec<PathBuf> = [std::env::var_os("WAYPATH_CELLS_WORKSPACE"), std::env::var_os("CARGO_MANIFEST_DIR")]
        .into_iter()
        .flatten()
        .map(PathBuf::from)
        .chain([PathBuf::from(env!("CARGO_MANIFEST_DIR"))])
        .collect();
    candidates
        .iter()
        .find_map(|start| start.ancestors().find(|dir| holds_the_runner(dir)).map(Path::to_path_buf))
        .map(|dir| dir.canonicalize().unwrap_or(dir))
        .ok_or_else(|| {
            format!(
                "cannot find the Waypath workspace that Rust cells are built in (looked above {}); set WAYPATH_CELLS_WORKSPACE \
                 to the folder of Waypath's top-level Cargo.toml",
                candidates.iter().map(|c| c.display().to_string()).collect::<Vec<_>>().join(", ")
            )
        })
}

/// A workspace folder whose `Cargo.toml` lists the runner's package.
fn holds_the_runner(dir: &Path) -> bool {
    std::fs::read_to_string(dir.join("Cargo.toml")).is_ok_and(|text| text.contains("[workspace]") && text.contains("kernel-ext/rust-host"))
}

/// The `waypath-rust` program beside this one (or `$WAYPATH_RUST_RUNNER`),
/// or an error that says how to build it.
pub fn runner_program() -> Result<PathBuf, String> {
    if let Some(path) = std::env::var_os("WAYPATH_RUST_RUNNER") {
        return Ok(PathBuf::from(path));
    }
    let exe = std::env::current_exe().map_err(|e| format!("cannot find the waypath program: {e}"))?;
    let dir = exe.parent().map(|d| if d.ends_with("deps") { d.parent().unwrap_or(d) } else { d }).unwrap_or(Path::new("."));
    let program = dir.join("waypath-rust");
    if program.is_file() {
        return Ok(program);
    }
    let place = build_place()?;
    let release = if place.profile == "release" { " --release" } else { "" };
    Err(format!(
        "this notebook has Rust cells, and their runner is not built ({} is missing); build it once with \
         `cargo build{release} -p waypath-rust-host` in {} (about ten minutes on two cores), then run the cell again",
        program.display(),
        place.workspace.display()
    ))
}

/// Link (or confirm) the dynamic library, passing cargo's progress lines on.
pub fn prepare(progress: &dyn Fn(&str)) -> Result<CellsLibrary, String> {
    let place = build_place()?;
    progress("preparing the waypath library for Rust cells (linked once per build; later cells start in seconds)…");
    let offline = cargo_rustc(&place, true, progress)?;
    if let Err(first) = offline {
        if !wants_network(&first) {
            return Err(build_failure(&place, &first));
        }
        progress("a package is missing from the cargo cache; fetching it…");
        if let Err(second) = cargo_rustc(&place, false, progress)? {
            return Err(build_failure(&place, &second));
        }
    }
    if let Some(note) = ensure_std_sources(progress) {
        progress(&note);
    }
    let out = place.target.join(&place.profile);
    let dylib = out.join(format!("{}waypath_cells{}", std::env::consts::DLL_PREFIX, std::env::consts::DLL_SUFFIX));
    if !dylib.is_file() {
        return Err(format!("cargo finished but {} was not written", dylib.display()));
    }
    Ok(CellsLibrary { dylib, deps: out.join("deps"), std_dir: rust_std_dir() })
}

/// evcxr names the types of variables kept between cells with
/// rust-analyzer, which reads the standard library's source as a cargo
/// workspace (`rust-src`) and so needs that workspace's own packages in the
/// cargo cache. They are checked offline; when missing they are fetched
/// once (with `RUSTC_BOOTSTRAP=1`, as rust-analyzer itself reads that
/// workspace); when that is impossible the answer is a note, not an error:
/// cells still run, and variables of standard-library types then need their
/// type written.
fn ensure_std_sources(progress: &dyn Fn(&str)) -> Option<String> {
    let manifest = rustc_print("sysroot")
        .map(|root| root.join("lib/rustlib/src/rust/library/Cargo.toml"))
        .filter(|m| m.is_file())?;
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let run = |verb: &[&str]| {
        Command::new(&cargo)
            .args(verb)
            .arg("--manifest-path")
            .arg(&manifest)
            .arg("--locked")
            .env("RUSTC_BOOTSTRAP", "1")
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status()
            .is_ok_and(|s| s.success())
    };
    if run(&["metadata", "--format-version", "1", "--offline"]) {
        return None;
    }
    progress("fetching the standard library's own packages once, so that Rust cells can name the types of their variables…");
    if run(&["fetch"]) {
        return None;
    }
    Some(format!(
        "note: without a network the standard library's packages could not be fetched, so variables kept between Rust \
         cells need their type written (`let heights: Vec<f64> = …`); to lift this, run once with a network: \
         RUSTC_BOOTSTRAP=1 cargo fetch --locked --manifest-path {}",
        manifest.display()
    ))
}

/// The cargo command that links the library; its own tools' paths come
/// from the environment (`CARGO`, `CARGO_HOME`, `RUSTC`).
fn cargo_command(place: &BuildPlace, offline: bool) -> Command {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let mut command = Command::new(cargo);
    command.current_dir(&place.workspace).args(["rustc", "-p", "waypath-rust-host", "--lib", "--locked", "--crate-type", "dylib"]);
    if place.profile == "release" {
        command.arg("--release");
    }
    if offline {
        command.arg("--offline");
    }
    command.args(["--", "-C", "prefer-dynamic"]);
    command.env("CARGO_TARGET_DIR", &place.target).env_remove("RUSTFLAGS").env_remove("CARGO_ENCODED_RUSTFLAGS");
    command
}

/// Run cargo once: `Ok(Ok(()))` on success, `Ok(Err(log))` when cargo
/// failed, `Err` when cargo could not be started at all.
fn cargo_rustc(place: &BuildPlace, offline: bool, progress: &dyn Fn(&str)) -> Result<Result<(), String>, String> {
    let mut child = cargo_command(place, offline)
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| format!("Rust cells need cargo (the Rust toolchain's build tool) on PATH: {e}"))?;
    let mut log = String::new();
    if let Some(stderr) = child.stderr.take() {
        for line in BufReader::new(stderr).lines().map_while(Result::ok) {
            let trimmed = line.trim_start();
            if trimmed.starts_with("Compiling") || trimmed.starts_with("Downloaded") || trimmed.starts_with("Finished") {
                progress(&format!("    {trimmed}"));
            }
            log.push_str(&line);
            log.push('\n');
        }
    }
    let status = child.wait().map_err(|e| format!("cargo did not finish: {e}"))?;
    Ok(if status.success() { Ok(()) } else { Err(log) })
}

/// Whether an offline build failed only for want of a download.
fn wants_network(log: &str) -> bool {
    log.contains("--offline") || log.contains("failed to download") || log.contains("offline mode")
}

/// One line with the cause and the command to try, the cargo log folded below.
fn build_failure(place: &BuildPlace, log: &str) -> String {
    let cause = log
        .lines()
        .map(str::trim)
        .find(|l| l.starts_with("error"))
        .unwrap_or("cargo failed")
        .to_string();
    let release = if place.profile == "release" { " --release" } else { "" };
    let folded: String = log.trim().lines().map(|l| format!("    | {l}\n")).collect();
    format!(
        "the waypath library for Rust cells could not be linked: {cause}\n  to retry by hand, run in {}: \
         cargo rustc{release} -p waypath-rust-host --lib --locked --crate-type dylib -- -C prefer-dynamic\n  cargo's log:\n{folded}",
        place.workspace.display()
    )
}

/// The folder of the toolchain's shared `libstd`, which compiled cells and
/// the library link to.
fn rust_std_dir() -> Option<PathBuf> {
    rustc_print("target-libdir")
}

/// A folder rustc reports with `--print WHAT`.
fn rustc_print(what: &str) -> Option<PathBuf> {
    let rustc = std::env::var_os("RUSTC").unwrap_or_else(|| "rustc".into());
    let out = Command::new(rustc).args(["--print", what]).output().ok()?;
    let dir = String::from_utf8(out.stdout).ok()?.trim().to_string();
    (out.status.success() && !dir.is_empty()).then(|| PathBuf::from(dir))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_offline_build_that_lacks_a_package_asks_for_the_network() {
        // The wording of cargo 1.95's offline refusal (seen in this project's
        // issue 11 log).
        let log = "error: failed to download `bumpalo v3.20.4`\n\nCaused by:\n  attempting to make an HTTP request, but --offline was specified";
        assert!(wants_network(log));
        assert!(!wants_network("error[E0425]: cannot find value `x` in this scope"));
    }

    /// The workspace is found from where the program runs (cargo's
    /// run-time `CARGO_MANIFEST_DIR`, here `kernel-ext`), by its own
    /// top-level `Cargo.toml`; a folder without it is not taken.
    #[test]
    fn the_workspace_is_the_folder_whose_manifest_lists_the_runner() {
        let root = workspace_root().expect("the test runs inside the workspace");
        let manifest = std::fs::read_to_string(root.join("Cargo.toml")).unwrap();
        assert!(manifest.contains("\"kernel-ext/rust-host\""), "{}", root.display());
        assert!(root.join("kernel-ext").join("rust-host").is_dir());
        assert!(!holds_the_runner(&root.join("kernel-ext")));
        assert!(!holds_the_runner(&std::env::temp_dir()));
    }

    #[test]
    fn a_failed_link_leads_with_its_cause_and_the_command() {
        let place = BuildPlace { workspace: "/w".into(), target: "/t".into(), profile: "release".into() };
        let text = build_failure(&place, "   Compiling waypath v0.1.0\nerror: linker `cc` not found\n  = note: No such file");
        let first = text.lines().next().unwrap_or("");
        assert!(first.ends_with("error: linker `cc` not found"), "{first}");
        assert!(text.contains("cargo rustc --release -p waypath-rust-host"), "{text}");
        assert!(text.contains("    | error: linker `cc` not found"), "{text}");
    }
}
