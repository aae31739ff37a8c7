//! `waypath-rust`: the process that runs `%%rust` cells for the Waypath
//! kernel and `waypath run`.
//!
//! It is its own program so that the `waypath` program does not carry evcxr
//! (and its long compile) for notebooks that never use a Rust cell. The
//! kernel starts it on the first Rust cell and talks to it in JSON lines:
//! requests on standard input, events on standard output (see [`protocol`]).
//!
//! Cells compile against a prebuilt Rust dynamic library of `waypath`
//! (this package's library, `waypath_cells`, named by `--cells-lib`), given to the compiler
//! with `--extern waypath=…`; the dependencies it was built from are found
//! in the folder named by `--deps`. A cell therefore compiles only its own
//! code, offline, and no package is resolved for the Rust context.
//!
//! evcxr runs the compiled cells in a child process, which is this same
//! program (`evcxr::runtime_hook` turns it into that child).

mod protocol;
mod session;
mod type_view;

use std::path::PathBuf;
use std::process::ExitCode;

use protocol::{Events, Request};

const USAGE: &str = "usage: waypath-rust --cells-lib LIBWAYPATH_CELLS.so --deps DEPS_FOLDER
(started by the waypath kernel and `waypath run`; it reads JSON requests on standard input)";

fn main() -> ExitCode {
    evcxr::runtime_hook();
    let Some((cells_lib, deps)) = parse_args(std::env::args().skip(1).collect()) else {
        eprintln!("{USAGE}");
        return ExitCode::from(2);
    };
    let events = Events::stdout();
    let mut runner = match session::Runner::start(&cells_lib, &deps, &events) {
        Ok(runner) => runner,
        Err(failure) => {
            events.failed(&failure);
            return ExitCode::from(1);
        }
    };
    events.ready();
    let requests = protocol::read_requests(std::io::BufReader::new(std::io::stdin()), runner.interrupter());
    for request in requests {
        match request {
            Request::Run(code) => runner.run(&code, &events),
            Request::Variables => events.variables(&runner.variables()),
            Request::Describe(name) => events.described(&name, runner.describe(&name).as_deref()),
        }
    }
    ExitCode::SUCCESS
}

/// `--cells-lib FILE --deps DIR`, in any order.
fn parse_args(args: Vec<String>) -> Option<(PathBuf, PathBuf)> {
    let mut cells_lib = None;
    let mut deps = None;
    let mut args = args.into_iter();
    while let Some(flag) = args.next() {
        match flag.as_str() {
            "--cells-lib" => cells_lib = args.next().map(PathBuf::from),
            "--deps" => deps = args.next().map(PathBuf::from),
            _ => return None,
        }
    }
    Some((cells_lib?, deps?))
}
