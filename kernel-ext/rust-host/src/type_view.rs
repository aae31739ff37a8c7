//! A source-only view of the library for evcxr's type inference.
//!
//! evcxr keeps a cell's variables for later cells and must name their
//! types; it asks rust-analyzer, which reads the crates listed in the
//! context's `Cargo.toml`. Cells link to the prebuilt library through
//! compiler flags, which rust-analyzer does not see, so the context also
//! lists a crate named `waypath` whose source is the library's own
//! `src/lib.rs` — as a *dev-dependency*, which rust-analyzer reads for the
//! context's code but cargo never compiles for it. The view has no
//! dependencies of its own, so nothing is resolved or downloaded for it;
//! types of the library's dependencies (a random generator, say) are
//! therefore not inferred, and a variable holding one needs its type
//! written.
//!
//! evcxr 0.22 writes each dependency as one `name = config` line at the end
//! of the context's `Cargo.toml`; the config given here ends the
//! `[dependencies]` table with an optional (never compiled) placeholder and
//! opens `[dev-dependencies]` for the view. The evcxr version is pinned in
//! the workspace lock; the kernel tests with untyped `let` bindings of
//! library types would fail if this stopped working.

use std::path::{Path, PathBuf};

/// The placeholder's crate name (a dependency key in the context).
const PLACEHOLDER: &str = "waypath_type_view_placeholder";

/// The library's `src/lib.rs` in the workspace this program was built from.
fn library_root() -> PathBuf {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../library/src/lib.rs");
    root.canonicalize().unwrap_or(root)
}

/// Write the view and the placeholder under `slot`, and return the
/// dependency key and config to hand to evcxr.
pub fn dependency_lines(slot: &Path) -> Result<(&'static str, String), String> {
    let lib = library_root();
    if !lib.is_file() {
        return Err(format!("the library source {} is missing; Rust cells need the workspace they were built from", lib.display()));
    }
    let base = slot.join("type-view");
    let view = base.join("waypath");
    let placeholder = base.join("placeholder");
    write(&view.join("Cargo.toml"), &format!(
        "[package]\nname = \"waypath\"\nversion = \"0.0.0\"\nedition = \"2021\"\npublish = false\n\n[lib]\npath = {}\n",
        toml_string(&lib)
    ))?;
    write(&placeholder.join("Cargo.toml"), &format!(
        "[package]\nname = \"{PLACEHOLDER}\"\nversion = \"0.0.0\"\nedition = \"2021\"\npublish = false\n\n[lib]\npath = \"lib.rs\"\n"
    ))?;
    write(&placeholder.join("lib.rs"), "")?;
    let config = format!(
        "{{ path = {}, optional = true }}\n\n[dev-dependencies]\nwaypath = {{ path = {} }}",
        toml_string(&placeholder),
        toml_string(&view)
    );
    Ok((PLACEHOLDER, config))
}

fn write(path: &Path, text: &str) -> Result<(), String> {
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir).map_err(|e| format!("cannot make {}: {e}", dir.display()))?;
    }
    std::fs::write(path, text).map_err(|e| format!("cannot write {}: {e}", path.display()))
}

/// A TOML basic string (quotes and backslashes escaped).
fn toml_string(path: &Path) -> String {
    let text = path.display().to_string().replace('\\', "\\\\").replace('"', "\\\"");
    format!("\"{text}\"")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_view_is_a_dev_dependency_and_the_placeholder_is_optional() {
        let slot = std::env::temp_dir().join(format!("waypath-type-view-test-{}", std::process::id()));
        let (key, config) = dependency_lines(&slot).expect("writes the view");
        let manifest = std::fs::read_to_string(slot.join("type-view/waypath/Cargo.toml")).expect("view manifest");
        let _ = std::fs::remove_dir_all(&slot);
        // The text evcxr 0.22 writes: `key = config` as the last lines of the file.
        let tail = format!("[dependencies]\n{key} = {config}\n");
        let sections: Vec<&str> = tail.lines().filter(|l| l.starts_with('[')).collect();
        assert_eq!(sections, ["[dependencies]", "[dev-dependencies]"]);
        assert!(tail.contains("optional = true"), "{tail}");
        assert!(tail.lines().any(|l| l.starts_with("waypath = { path = ")), "{tail}");
        assert!(manifest.contains("library/src/lib.rs"), "{manifest}");
        assert!(!manifest.contains("[dependencies]"), "the view resolves no packages: {manifest}");
    }
}
