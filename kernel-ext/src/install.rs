//! `waypath install`: the Jupyter kernelspec (`kernel.json`) and logos.
//!
//! The logo is drawn here in code — a dark rounded tile with a path through
//! three waypoints — once as SVG and once rasterised at 32 and 64 pixels
//! (4×4 supersampling, written as a PNG with stored deflate blocks), so the
//! kernelspec needs no image files or imaging crates.

use std::path::{Path, PathBuf};

use serde_json::json;

/// The kernelspec's folder name (the kernel name Jupyter uses).
pub const KERNEL_NAME: &str = "waypath";

/// Where the kernelspec goes, as `jupyter kernelspec install` means it.
#[derive(Debug, Clone, PartialEq)]
pub enum InstallPlace {
    /// The user's Jupyter data folder.
    User,
    /// The active Python environment (`$VIRTUAL_ENV` or `$CONDA_PREFIX`).
    SysPrefix,
    /// `PREFIX/share/jupyter/kernels`.
    Prefix(PathBuf),
}

/// Why the kernelspec could not be written.
#[derive(Debug, thiserror::Error)]
pub enum InstallError {
    #[error("no Python environment is active ($VIRTUAL_ENV and $CONDA_PREFIX are unset); use --user or --prefix PATH")]
    NoEnvironment,
    #[error("cannot find the home folder ($HOME is unset); use --prefix PATH")]
    NoHome,
    #[error("cannot find the waypath program's own path: {0}")]
    Executable(std::io::Error),
    #[error("cannot write {path}: {source}")]
    Write { path: String, source: std::io::Error },
}

/// The kernels folder of an install place.
pub fn kernels_dir(place: &InstallPlace) -> Result<PathBuf, InstallError> {
    let share = |prefix: PathBuf| prefix.join("share").join("jupyter").join("kernels");
    match place {
        InstallPlace::Prefix(prefix) => Ok(share(prefix.clone())),
        InstallPlace::SysPrefix => std::env::var_os("VIRTUAL_ENV")
            .or_else(|| std::env::var_os("CONDA_PREFIX"))
            .map(|p| share(PathBuf::from(p)))
            .ok_or(InstallError::NoEnvironment),
        InstallPlace::User => {
            if let Some(data) = std::env::var_os("JUPYTER_DATA_DIR") {
                return Ok(PathBuf::from(data).join("kernels"));
            }
            let home = std::env::var_os("HOME").map(PathBuf::from).ok_or(InstallError::NoHome)?;
            Ok(if cfg!(target_os = "macos") {
                home.join("Library").join("Jupyter").join("kernels")
            } else {
                std::env::var_os("XDG_DATA_HOME")
                    .map(PathBuf::from)
                    .unwrap_or_else(|| home.join(".local").join("share"))
                    .join("jupyter")
                    .join("kernels")
            })
        }
    }
}

/// Write the kernelspec for `program` (an absolute path to `waypath`) and
/// return its folder.
pub fn install(place: &InstallPlace, program: &Path) -> Result<PathBuf, InstallError> {
    let dir = kernels_dir(place)?.join(KERNEL_NAME);
    let write = |name: &str, bytes: &[u8]| {
        let path = dir.join(name);
        std::fs::create_dir_all(&dir)
            .and_then(|_| std::fs::write(&path, bytes))
            .map_err(|source| InstallError::Write { path: path.display().to_string(), source })
    };
    let spec = json!({
        "argv": [program.display().to_string(), "kernel", "--connection-file", "{connection_file}"],
        "display_name": "Waypath",
        "language": "waypath",
        "interrupt_mode": "message",
        "metadata": {},
    });
    write("kernel.json", serde_json::to_string_pretty(&spec).unwrap_or_default().as_bytes())?;
    write("logo-svg.svg", logo_svg().as_bytes())?;
    write("logo-32x32.png", &logo_png(32))?;
    write("logo-64x64.png", &logo_png(64))?;
    Ok(dir)
}

/// The running program's absolute path.
pub fn this_program() -> Result<PathBuf, InstallError> {
    std::env::current_exe().and_then(|p| p.canonicalize()).map_err(InstallError::Executable)
}

const TILE: [u8; 3] = [0x12, 0x3a, 0x52];
const TRAIL: [u8; 3] = [0xe8, 0xa3, 0x3d];
const WAYPOINT: [u8; 3] = [0xf7, 0xf4, 0xea];
/// Waypoints in unit coordinates (x right, y down).
const POINTS: [(f64, f64); 3] = [(0.23, 0.72), (0.50, 0.30), (0.77, 0.64)];
const CORNER: f64 = 0.2;
const TRAIL_HALF_WIDTH: f64 = 0.045;
const WAYPOINT_RADIUS: f64 = 0.095;

/// The logo as SVG (a 64-unit square).
pub fn logo_svg() -> String {
    let hex = |c: [u8; 3]| format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2]);
    let s = |v: f64| format!("{:.2}", v * 64.0);
    let trail: Vec<String> = POINTS.iter().map(|&(x, y)| format!("{},{}", s(x), s(y))).collect();
    let dots: String = POINTS
        .iter()
        .map(|&(x, y)| format!("<circle cx=\"{}\" cy=\"{}\" r=\"{}\" fill=\"{}\"/>", s(x), s(y), s(WAYPOINT_RADIUS), hex(WAYPOINT)))
        .collect();
    format!(
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"64\" height=\"64\" viewBox=\"0 0 64 64\">\
         <rect width=\"64\" height=\"64\" rx=\"{r}\" fill=\"{tile}\"/>\
         <polyline points=\"{pts}\" fill=\"none\" stroke=\"{trail}\" stroke-width=\"{w}\" stroke-linecap=\"round\" stroke-linejoin=\"round\"/>\
         {dots}</svg>\n",
        r = s(CORNER),
        tile = hex(TILE),
        pts = trail.join(" "),
        trail = hex(TRAIL),
        w = s(2.0 * TRAIL_HALF_WIDTH),
    )
}

/// The colour of the logo at unit point (x, y), or `None` outside the tile.
fn logo_colour(x: f64, y: f64) -> Option<[u8; 3]> {
    let inside_tile = {
        let cx = x.clamp(CORNER, 1.0 - CORNER);
        let cy = y.clamp(CORNER, 1.0 - CORNER);
        (0.0..=1.0).contains(&x) && (0.0..=1.0).contains(&y) && (x - cx).hypot(y - cy) <= CORNER
    };
    if !inside_tile {
        return None;
    }
    if POINTS.iter().any(|&(px, py)| (x - px).hypot(y - py) <= WAYPOINT_RADIUS) {
        return Some(WAYPOINT);
    }
    let on_trail = POINTS.windows(2).any(|w| distance_to_segment((x, y), w[0], w[1]) <= TRAIL_HALF_WIDTH);
    Some(if on_trail { TRAIL } else { TILE })
}

fn distance_to_segment(p: (f64, f64), a: (f64, f64), b: (f64, f64)) -> f64 {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let t = (((p.0 - a.0) * dx + (p.1 - a.1) * dy) / (dx * dx + dy * dy)).clamp(0.0, 1.0);
    (p.0 - a.0 - t * dx).hypot(p.1 - a.1 - t * dy)
}

/// RGBA pixels of the logo at `size`×`size`, 4×4 samples per pixel.
fn logo_pixels(size: usize) -> Vec<u8> {
    const SAMPLES: usize = 4;
    let mut rgba = Vec::with_capacity(size * size * 4);
    for row in 0..size {
        for col in 0..size {
            let mut sum = [0.0f64; 4];
            for sy in 0..SAMPLES {
                for sx in 0..SAMPLES {
                    let x = (col as f64 + (sx as f64 + 0.5) / SAMPLES as f64) / size as f64;
                    let y = (row as f64 + (sy as f64 + 0.5) / SAMPLES as f64) / size as f64;
                    if let Some(c) = logo_colour(x, y) {
                        for k in 0..3 {
                            sum[k] += f64::from(c[k]);
                        }
                        sum[3] += 255.0;
                    }
                }
            }
            let n = (SAMPLES * SAMPLES) as f64;
            let alpha = sum[3] / n;
            for channel in &sum[..3] {
                let covered = sum[3] / 255.0;
                rgba.push(if covered > 0.0 { (channel / covered).round() as u8 } else { 0 });
            }
            rgba.push(alpha.round() as u8);
        }
    }
    rgba
}

/// The logo as a PNG file of `size`×`size` pixels.
pub fn logo_png(size: usize) -> Vec<u8> {
    let pixels = logo_pixels(size);
    let mut raw = Vec::with_capacity(size * (size * 4 + 1));
    for row in pixels.chunks(size * 4) {
        raw.push(0); // filter type 0: none
        raw.extend_from_slice(row);
    }
    let mut png = b"\x89PNG\r\n\x1a\n".to_vec();
    let mut header = Vec::new();
    header.extend_from_slice(&(size as u32).to_be_bytes());
    header.extend_from_slice(&(size as u32).to_be_bytes());
    header.extend_from_slice(&[8, 6, 0, 0, 0]); // 8-bit RGBA, deflate, no interlace
    push_chunk(&mut png, b"IHDR", &header);
    push_chunk(&mut png, b"IDAT", &zlib_stored(&raw));
    push_chunk(&mut png, b"IEND", &[]);
    png
}

fn push_chunk(png: &mut Vec<u8>, kind: &[u8; 4], data: &[u8]) {
    png.extend_from_slice(&(data.len() as u32).to_be_bytes());
    let start = png.len();
    png.extend_from_slice(kind);
    png.extend_from_slice(data);
    let crc = crc32(&png[start..]);
    png.extend_from_slice(&crc.to_be_bytes());
}

/// A zlib stream of stored (uncompressed) deflate blocks (RFC 1950/1951).
fn zlib_stored(data: &[u8]) -> Vec<u8> {
    let mut out = vec![0x78, 0x01];
    let blocks: Vec<&[u8]> = if data.is_empty() { vec![&[][..]] } else { data.chunks(65_535).collect() };
    for (i, block) in blocks.iter().enumerate() {
        out.push(u8::from(i + 1 == blocks.len()));
        let len = block.len() as u16;
        out.extend_from_slice(&len.to_le_bytes());
        out.extend_from_slice(&(!len).to_le_bytes());
        out.extend_from_slice(block);
    }
    out.extend_from_slice(&adler32(data).to_be_bytes());
    out
}

/// CRC-32 (ISO 3309, reflected polynomial 0xEDB88320), as PNG chunks use.
fn crc32(data: &[u8]) -> u32 {
    let mut crc = 0xffff_ffffu32;
    for &byte in data {
        crc ^= u32::from(byte);
        for _ in 0..8 {
            crc = if crc & 1 == 1 { (crc >> 1) ^ 0xedb8_8320 } else { crc >> 1 };
        }
    }
    !crc
}

/// Adler-32 checksum (RFC 1950).
fn adler32(data: &[u8]) -> u32 {
    let (mut a, mut b) = (1u32, 0u32);
    for &byte in data {
        a = (a + u32::from(byte)) % 65_521;
        b = (b + a) % 65_521;
    }
    (b << 16) | a
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn checksums_match_their_published_check_values() {
        // CRC-32 check value of "123456789" is 0xCBF43926 (the CRC catalogue's
        // "CRC-32/ISO-HDLC" entry, recalled); Adler-32 of "Wikipedia" is
        // 0x11E60398 (RFC 1950's algorithm; worked example recalled).
        assert_eq!(crc32(b"123456789"), 0xcbf4_3926);
        assert_eq!(adler32(b"Wikipedia"), 0x11e6_0398);
    }
}
