//! Collision meshes named by a URDF: finding their files, reading them (STL through `stl_io`,
//! OBJ through `tobj`) and reducing each to the convex hull the plant collides with (a trunk or
//! leg touching the ground is a fall, so a hull is enough; the feet stay the facts' spheres).
//!
//! Where a `<mesh filename="…">` is looked for, in this order (the first file that exists wins):
//! - `package://NAME/rest`: for each folder D of the robot facts' `package_dirs` (relative to
//!   the facts file), then of the environment variable [`PACKAGE_PATH_ENV`] (folders separated
//!   by `:`), then the URDF's own folder and each of its parents: `D/rest` when D is the package
//!   itself (its name is NAME, or its `package.xml` says `<name>NAME</name>`), else `D/NAME/rest`.
//! - `file:///abs/path` or an absolute path: that file.
//! - any other (relative) path: relative to the URDF's folder.
//!
//! A file that is not found, or whose format is not read (only `.stl` and `.obj`), leaves its
//! link without that collision shape: the loader lists it ([`MissingMesh`]) and the commands
//! say so once on stderr and in the run's manifest. A file that is found but cannot be read is
//! bad input (one message naming the link and the file).

use crate::limits::MAX_URDF_BYTES;
use rapier3d::math::Vector;
use std::path::{Path, PathBuf};

/// Environment variable with extra folders to search for `package://` meshes (`:`-separated).
pub const PACKAGE_PATH_ENV: &str = "GRIPSWEEP_PACKAGE_PATH";

/// Largest mesh file read, bytes (as large as a URDF may be).
pub const MAX_MESH_BYTES: u64 = MAX_URDF_BYTES;

/// One collision mesh, loaded: the hull's vertices in the `<collision>` element's frame, the
/// URDF `scale` applied.
#[derive(Clone, Debug, PartialEq)]
pub struct CollisionMesh {
    /// Link that carries it.
    pub link: String,
    /// Index of the `<collision>` element in the link.
    pub index: usize,
    /// The file it was read from.
    pub file: PathBuf,
    /// SHA-256 of the file's bytes (for the manifest's inputs).
    pub sha256: String,
    /// Vertices of its convex hull, m, in the collision element's frame.
    pub hull: Vec<[f64; 3]>,
}

/// A collision mesh the plant goes without.
#[derive(Clone, Debug, PartialEq)]
pub struct MissingMesh {
    pub link: String,
    /// The URDF's `filename`.
    pub uri: String,
    /// Why: not found (and where it was looked for), or a format not read.
    pub reason: String,
}

/// Where to look for mesh files.
#[derive(Clone, Debug, Default)]
pub struct MeshSearch {
    /// The URDF's folder (none for an embedded URDF: only absolute paths resolve).
    pub urdf_dir: Option<PathBuf>,
    /// Folders from the facts' `package_dirs` (already joined to the facts file's folder) and
    /// the environment variable, in that order.
    pub package_dirs: Vec<PathBuf>,
}

impl MeshSearch {
    /// The search for a URDF in `urdf_dir`, with the facts' `package_dirs` (relative to
    /// `facts_dir`) and [`PACKAGE_PATH_ENV`].
    pub fn new(urdf_dir: Option<&Path>, facts_dir: Option<&Path>, facts_dirs: &[String]) -> Self {
        let mut package_dirs: Vec<PathBuf> = facts_dirs
            .iter()
            .map(|d| facts_dir.unwrap_or(Path::new(".")).join(d))
            .collect();
        if let Some(env) = std::env::var_os(PACKAGE_PATH_ENV) {
            package_dirs.extend(std::env::split_paths(&env).filter(|p| !p.as_os_str().is_empty()));
        }
        MeshSearch {
            urdf_dir: urdf_dir.map(Path::to_path_buf),
            package_dirs,
        }
    }
}

/// Whether folder `d` is the package `name`: its folder name, or its package.xml's `<name>`.
fn is_package(d: &Path, name: &str) -> bool {
    if d.file_name().and_then(|n| n.to_str()) == Some(name) {
        return true;
    }
    std::fs::read_to_string(d.join("package.xml"))
        .ok()
        .is_some_and(|xml| xml.contains(&format!("<name>{name}</name>")))
}

/// The file a mesh `uri` names, or why none was found (the places looked at).
pub fn resolve(uri: &str, search: &MeshSearch) -> Result<PathBuf, String> {
    if let Some(rest) = uri.strip_prefix("package://") {
        let (name, rel) = rest.split_once('/').unwrap_or((rest, ""));
        let mut roots: Vec<PathBuf> = search.package_dirs.clone();
        if let Some(dir) = &search.urdf_dir {
            roots.extend(dir.ancestors().map(Path::to_path_buf));
        }
        for d in &roots {
            let d = if d.as_os_str().is_empty() {
                Path::new(".")
            } else {
                d
            };
            for candidate in [
                is_package(d, name).then(|| d.join(rel)),
                Some(d.join(name).join(rel)),
            ]
            .into_iter()
            .flatten()
            {
                if candidate.is_file() {
                    return Ok(candidate);
                }
            }
        }
        return Err(format!(
            "package '{name}' has no file '{rel}' in the facts' `package_dirs`, ${PACKAGE_PATH_ENV}, or the URDF's folder and its parents"
        ));
    }
    let path = match uri.strip_prefix("file://") {
        Some(p) => PathBuf::from(p),
        None => {
            let p = PathBuf::from(uri);
            match (&search.urdf_dir, p.is_absolute()) {
                (Some(dir), false) => dir.join(p),
                (None, false) => {
                    return Err("a relative path and no URDF folder to resolve it against".into());
                }
                _ => p,
            }
        }
    };
    if path.is_file() {
        Ok(path)
    } else {
        Err(format!("no file {}", path.display()))
    }
}

/// The vertices of a mesh file, m, before scaling.
fn read_vertices(path: &Path) -> Result<Vec<[f64; 3]>, String> {
    let meta = std::fs::metadata(path).map_err(|e| format!("cannot read: {e}"))?;
    if meta.len() > MAX_MESH_BYTES {
        return Err(format!(
            "{} bytes; allowed: at most {MAX_MESH_BYTES}",
            meta.len()
        ));
    }
    let bytes = std::fs::read(path).map_err(|e| format!("cannot read: {e}"))?;
    let ext = extension(path);
    match ext.as_deref() {
        Some("stl") => {
            let mesh = stl_io::read_stl(&mut std::io::Cursor::new(&bytes))
                .map_err(|e| format!("not a readable STL file: {e}"))?;
            Ok(mesh
                .vertices
                .iter()
                .map(|v| [f64::from(v[0]), f64::from(v[1]), f64::from(v[2])])
                .collect())
        }
        Some("obj") => {
            let opts = tobj::LoadOptions {
                ignore_points: true,
                ignore_lines: true,
                ..Default::default()
            };
            // Materials do not matter for a collision hull: never read a .mtl file.
            let (models, _) = tobj::load_obj_buf(&mut std::io::Cursor::new(&bytes), &opts, |_| {
                Err(tobj::LoadError::OpenFileFailed)
            })
            .map_err(|e| format!("not a readable OBJ file: {e}"))?;
            Ok(models
                .iter()
                .flat_map(|m| m.mesh.positions.chunks_exact(3))
                .map(|p| [f64::from(p[0]), f64::from(p[1]), f64::from(p[2])])
                .collect())
        }
        _ => Err("a format this tool does not read".into()),
    }
}

fn extension(path: &Path) -> Option<String> {
    path.extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
}

fn sha256_bytes(bytes: &[u8]) -> String {
    use sha2::{Digest, Sha256};
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Load every collision mesh of the URDF's links except `skip` (the feet: their collision is
/// the facts' sphere). Returns the loaded hulls and the meshes left out; an existing file that
/// cannot be read is an error naming the link and the file.
pub fn load(
    urdf: &urdf_rs::Robot,
    search: &MeshSearch,
    skip: &[String],
) -> Result<(Vec<CollisionMesh>, Vec<MissingMesh>), String> {
    let mut loaded = Vec::new();
    let mut missing = Vec::new();
    for link in &urdf.links {
        if skip.contains(&link.name) {
            continue;
        }
        for (index, col) in link.collision.iter().enumerate() {
            let urdf_rs::Geometry::Mesh { filename, scale } = &col.geometry else {
                continue;
            };
            let miss = |reason: String| MissingMesh {
                link: link.name.clone(),
                uri: filename.clone(),
                reason,
            };
            let file = match resolve(filename, search) {
                Ok(f) => f,
                Err(reason) => {
                    missing.push(miss(reason));
                    continue;
                }
            };
            if !matches!(extension(&file).as_deref(), Some("stl" | "obj")) {
                missing.push(miss(format!(
                    "{}: a format this tool does not read (STL and OBJ only)",
                    file.display()
                )));
                continue;
            }
            let bad = |e: String| {
                format!(
                    "link '{}': collision mesh {}: {e}",
                    link.name,
                    file.display()
                )
            };
            let scale = scale.as_ref().map_or([1.0; 3], |s| [s[0], s[1], s[2]]);
            if scale.iter().any(|s| !s.is_finite() || *s == 0.0) {
                return Err(bad(format!(
                    "scale {scale:?}: allowed: finite, non-zero factors"
                )));
            }
            let points: Vec<Vector> = read_vertices(&file)
                .map_err(bad)?
                .into_iter()
                .map(|p| Vector::new(p[0] * scale[0], p[1] * scale[1], p[2] * scale[2]))
                .collect();
            if points.iter().any(|p| !p.is_finite()) {
                return Err(bad("a vertex is not a finite number".into()));
            }
            let hull = match rapier3d::parry::transformation::try_convex_hull(&points) {
                Ok((vertices, _)) if vertices.len() >= 4 => vertices,
                _ => {
                    missing.push(miss(format!(
                        "{}: its {} vertices span no volume, so it has no convex hull",
                        file.display(),
                        points.len()
                    )));
                    continue;
                }
            };
            let sha256 = sha256_bytes(&std::fs::read(&file).map_err(|e| bad(e.to_string()))?);
            loaded.push(CollisionMesh {
                link: link.name.clone(),
                index,
                file,
                sha256,
                hull: hull.iter().map(|v| [v.x, v.y, v.z]).collect(),
            });
        }
    }
    Ok((loaded, missing))
}

/// The one warning about meshes left out: which links have no collision shape from them.
pub fn missing_warning(urdf_name: &str, missing: &[MissingMesh]) -> Option<String> {
    if missing.is_empty() {
        return None;
    }
    let mut links: Vec<&str> = missing.iter().map(|m| m.link.as_str()).collect();
    links.dedup();
    let details: Vec<String> = missing
        .iter()
        .map(|m| format!("link '{}' mesh \"{}\": {}", m.link, m.uri, m.reason))
        .collect();
    Some(format!(
        "{urdf_name}: {} collision mesh(es) not loaded, links left without that collision (a touch of the ground there is not seen as a fall): {}; {}",
        missing.len(),
        links.join(", "),
        details.join("; ")
    ))
}
