//! `waypath`: the command-line entry point.
//!
//! `waypath run ANALYSIS` executes a notebook or a plain-text analysis
//! headless, writing the executed notebook and a self-contained HTML report.
//! `waypath transcribe` turns one form of an analysis into the other.
//! `waypath install` registers the Jupyter kernel; `waypath kernel` is what
//! Jupyter starts. Confirmations go to standard output, errors to standard
//! error.

use std::path::PathBuf;
use std::process::ExitCode;

use waypath_kernel::install::{install, this_program, InstallPlace};
use waypath_kernel::kernel::{run_kernel, KernelSettings};
use waypath_kernel::notebook::{run_notebook, RunOptions};
use waypath_kernel::text_form::{transcribe, TranscribeOptions};

const HELP: &str = "\
waypath — causal questions of observational data, answered with Bayesian models

usage:
  waypath run ANALYSIS [--out EXECUTED.ipynb] [--html REPORT.html] [--keep-going]
      Execute every code cell in order, headless (no Jupyter needed). ANALYSIS is
      a notebook (.ipynb) or a plain-text analysis (.waypath). Writes the executed
      notebook (default: ANALYSIS.executed.ipynb beside the input) and, with
      --html, a self-contained report a colleague can open offline.
      Paths inside cells are read relative to the analysis file's folder.
      The first failing cell stops the run and the exit code is 1, unless
      --keep-going is given (failing cells are then recorded and skipped past).
  waypath transcribe FILE [--out OUTPUT] [--replace]
      Turn a plain-text analysis (.waypath) into a notebook (.ipynb) that opens
      in JupyterLab, or a notebook into text (outputs and metadata left out;
      it says what it left out). OUTPUT defaults to FILE with the other
      extension; an existing OUTPUT is kept unless --replace is given, and the
      input is never written over.
      Text form: each cell opens with a marker line, `=== code` (statements,
      or Rust after a %%rust first line), `=== notes` (Markdown) or `=== raw`.
  waypath install [--user | --sys-prefix | --prefix PATH]
      Register the Waypath kernel with Jupyter (kernel.json and logos), pointing
      at this program. --user (the default) writes to your Jupyter data folder,
      --sys-prefix to the active Python environment, --prefix under
      PATH/share/jupyter/kernels. Then pick Waypath in Jupyter.
  waypath kernel --connection-file FILE [--max-message-mib N]
      Run the Jupyter kernel (Jupyter starts this itself; FILE is the
      connection file it writes). Cells starting with a %%rust line are
      compiled and run as Rust with the waypath library available.
      The kernel listens only on the address the file gives and drops any
      client that sends a message larger than N MiB (default 256).
  waypath --help
      This text.
";

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match args.first().map(String::as_str) {
        Some("run") => run_command(&args[1..]),
        Some("transcribe") => transcribe_command(&args[1..]),
        Some("install") => install_command(&args[1..]),
        Some("kernel") => kernel_command(&args[1..]),
        None | Some("--help") | Some("-h") | Some("help") => {
            print!("{HELP}");
            ExitCode::SUCCESS
        }
        Some(other) => {
            eprintln!("waypath: unknown command {other:?}\n\n{HELP}");
            ExitCode::from(2)
        }
    }
}

fn run_command(args: &[String]) -> ExitCode {
    let options = match parse_run_args(args) {
        Ok(o) => o,
        Err(message) => {
            eprintln!("waypath run: {message}\n\n{HELP}");
            return ExitCode::from(2);
        }
    };
    match run_notebook(&options) {
        Ok(summary) => {
            eprintln!("{}", summary.describe());
            if summary.failed_cells.is_empty() { ExitCode::SUCCESS } else { ExitCode::from(1) }
        }
        Err(e) => {
            eprintln!("waypath run: {e}");
            ExitCode::from(1)
        }
    }
}

fn parse_run_args(args: &[String]) -> Result<RunOptions, String> {
    let mut input: Option<PathBuf> = None;
    let mut out: Option<PathBuf> = None;
    let mut html: Option<PathBuf> = None;
    let mut keep_going = false;
    let mut i = 0;
    while i < args.len() {
        match args[i].as_str() {
            "--out" | "--html" => {
                let value = args.get(i + 1).ok_or_else(|| format!("{} needs a file name", args[i]))?;
                if args[i] == "--out" { out = Some(value.into()) } else { html = Some(value.into()) }
                i += 1;
            }
            "--keep-going" => keep_going = true,
            flag if flag.starts_with("--") => return Err(format!("unknown option {flag}")),
            path if input.is_none() => input = Some(path.into()),
            extra => return Err(format!("one analysis at a time (also got {extra:?})")),
        }
        i += 1;
    }
    let input = input.ok_or("name the notebook or text analysis to run")?;
    let out = out.unwrap_or_else(|| input.with_extension("executed.ipynb"));
    Ok(RunOptions { input, out, html, keep_going })
}

fn transcribe_command(args: &[String]) -> ExitCode {
    let options = match parse_transcribe_args(args) {
        Ok(o) => o,
        Err(message) => {
            eprintln!("waypath transcribe: {message}\n\n{HELP}");
            return ExitCode::from(2);
        }
    };
    match transcribe(&options) {
        Ok(account) => {
            println!("{account}");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("waypath transcribe: {e}");
            ExitCode::from(1)
        }
    }
}

fn parse_transcribe_args(args: &[String]) -> Result<TranscribeOptions, String> {
    let mut input: Option<PathBuf> = None;
    let mut out: Option<PathBuf> = None;
    let mut replace = false;
    let mut i = 0;
    while i < args.len() {
        match args[i].as_str() {
            "--out" => {
                out = Some(args.get(i + 1).ok_or("--out needs a file name")?.into());
                i += 1;
            }
            "--replace" => replace = true,
            flag if flag.starts_with("--") => return Err(format!("unknown option {flag}")),
            path if input.is_none() => input = Some(path.into()),
            extra => return Err(format!("one file at a time (also got {extra:?})")),
        }
        i += 1;
    }
    let input = input.ok_or("name the .waypath or .ipynb file to convert")?;
    Ok(TranscribeOptions { input, out, replace })
}

fn install_command(args: &[String]) -> ExitCode {
    let place = match args {
        [] => InstallPlace::User,
        [flag] if flag == "--user" => InstallPlace::User,
        [flag] if flag == "--sys-prefix" => InstallPlace::SysPrefix,
        [flag, path] if flag == "--prefix" => InstallPlace::Prefix(path.into()),
        _ => {
            eprintln!("waypath install: expected one of --user, --sys-prefix, --prefix PATH\n\n{HELP}");
            return ExitCode::from(2);
        }
    };
    match this_program().and_then(|program| install(&place, &program)) {
        Ok(dir) => {
            println!("installed the Waypath kernel in {}", dir.display());
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("waypath install: {e}");
            ExitCode::from(1)
        }
    }
}

fn kernel_command(args: &[String]) -> ExitCode {
    let (file, settings) = match parse_kernel_args(args) {
        Ok(parsed) => parsed,
        Err(message) => {
            eprintln!("waypath kernel: {message}\n\n{HELP}");
            return ExitCode::from(2);
        }
    };
    match run_kernel(&file, settings) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("waypath kernel: {e}");
            ExitCode::from(1)
        }
    }
}

fn parse_kernel_args(args: &[String]) -> Result<(PathBuf, KernelSettings), String> {
    let mut file: Option<PathBuf> = None;
    let mut settings = KernelSettings::default();
    let mut i = 0;
    while i < args.len() {
        let value = || args.get(i + 1).ok_or_else(|| format!("{} needs a value", args[i]));
        match args[i].as_str() {
            "--connection-file" => file = Some(value()?.into()),
            "--max-message-mib" => settings.max_message_bytes = parse_mib(value()?)?,
            other => return Err(format!("unknown option {other:?}")),
        }
        i += 2;
    }
    Ok((file.ok_or("expected --connection-file FILE")?, settings))
}

/// A message-size cap in MiB: a whole number from 1 to 65536 (64 GiB).
fn parse_mib(text: &str) -> Result<usize, String> {
    match text.parse::<usize>() {
        Ok(mib) if (1..=65_536).contains(&mib) => Ok(mib << 20),
        _ => Err(format!("--max-message-mib takes a whole number of MiB from 1 to 65536, not {text:?}")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn args(list: &[&str]) -> Vec<String> {
        list.iter().map(|s| s.to_string()).collect()
    }

    #[test]
    fn the_message_cap_is_read_in_mib_and_checked() {
        let (file, settings) = parse_kernel_args(&args(&["--connection-file", "k.json"])).unwrap();
        assert_eq!(file, PathBuf::from("k.json"));
        assert_eq!(settings.max_message_bytes, 256 * 1024 * 1024);
        let (_, settings) = parse_kernel_args(&args(&["--max-message-mib", "3", "--connection-file", "k.json"])).unwrap();
        assert_eq!(settings.max_message_bytes, 3 * 1024 * 1024);
        for bad in ["0", "-1", "1.5", "65537", "lots"] {
            let err = parse_kernel_args(&args(&["--connection-file", "k.json", "--max-message-mib", bad])).unwrap_err();
            assert!(err.contains("from 1 to 65536"), "{bad}: {err}");
        }
        assert!(parse_kernel_args(&args(&["--max-message-mib", "4"])).unwrap_err().contains("--connection-file"));
        assert!(parse_kernel_args(&args(&["--connection-file"])).unwrap_err().contains("needs a value"));
    }
}
