//! The immutable robot description: a kinematic tree stored as flat arrays in topological order
//! (parent index < child index), after Featherstone, "Rigid Body Dynamics Algorithms" (2008),
//! chapter 4 (model data structures).
//!
//! # Conventions (the one place they are fixed)
//!
//! * Bodies: body 0 is the root (the URDF's root link, "the base"); body `k + 1` is moved by
//!   joint `k`. Links joined by fixed joints are merged into their parent body; their frames
//!   survive as named [`Frame`]s.
//! * Floating root: `q = [p (3), quaternion x y z w (4), joint positions]`,
//!   `v = [base linear velocity (3), base angular velocity (3), joint rates]`, the base twist
//!   expressed in the base frame (the velocity of the base frame's origin, in base axes).
//!   `nq = 7 + n_joints`, `nv = 6 + n_joints`. The base block of a generalized force is
//!   `[force (3), moment about the base origin (3)]` in base axes.
//! * Fixed root: the base is welded at [`Model::fixed_base_pose`]; `q` and `v` hold the joint
//!   entries only.
//! * Joint order is the order of a depth-first walk from the root, children taken in the order
//!   the URDF lists their joints; [`Model::joint_names`] reports it.
//! * Gravity is `[0, 0, -9.81]` m/s² in the world frame unless changed.

use crate::spatial::{Inertia, Mat3, Pose, Vec3};
use std::collections::HashMap;
use std::fmt;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum JointKind {
    /// Rotation about `axis`; `continuous` URDF joints are revolute joints without limits.
    Revolute,
    /// Translation along `axis`.
    Prismatic,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum RootKind {
    Floating,
    Fixed,
}

#[derive(Clone, Debug)]
pub struct Joint {
    pub name: String,
    pub kind: JointKind,
    /// Unit axis in the child body's frame.
    pub axis: Vec3,
    /// Index of the parent body.
    pub parent: usize,
    /// Placement of the child body's frame in the parent body's frame at q = 0.
    pub x_tree: Pose,
    /// Position limits (−∞, +∞ for continuous joints).
    pub lower: f64,
    pub upper: f64,
    pub velocity_limit: f64,
    pub effort_limit: f64,
    /// Reflected rotor inertia (kg·m² or kg), added to the diagonal of M when non-zero.
    pub armature: f64,
}

/// A named frame rigidly attached to a body.
#[derive(Clone, Debug)]
pub struct Frame {
    pub name: String,
    pub body: usize,
    pub placement: Pose,
}

#[derive(Clone, Debug)]
pub struct Model {
    pub name: String,
    pub root: RootKind,
    /// Placement of the base in the world when the root is fixed.
    pub fixed_base_pose: Pose,
    /// Name of the URDF link each body was built from.
    pub body_names: Vec<String>,
    /// Spatial inertia of each body about its own frame origin, fixed children merged in.
    pub inertias: Vec<Inertia>,
    pub joints: Vec<Joint>,
    pub frames: Vec<Frame>,
    pub gravity: Vec3,
}

/// A model that cannot be built, with the link or joint it is about.
#[derive(Clone, Debug, PartialEq)]
pub struct ModelError(pub String);

impl fmt::Display for ModelError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for ModelError {}

fn err<T>(msg: impl Into<String>) -> Result<T, ModelError> {
    Err(ModelError(msg.into()))
}

impl Model {
    pub fn n_joints(&self) -> usize {
        self.joints.len()
    }
    pub fn n_bodies(&self) -> usize {
        self.inertias.len()
    }
    /// Size of the base block in v (6 floating, 0 fixed).
    pub fn nv_base(&self) -> usize {
        match self.root {
            RootKind::Floating => 6,
            RootKind::Fixed => 0,
        }
    }
    /// Size of the base block in q (7 floating, 0 fixed).
    pub fn nq_base(&self) -> usize {
        match self.root {
            RootKind::Floating => 7,
            RootKind::Fixed => 0,
        }
    }
    pub fn nq(&self) -> usize {
        self.nq_base() + self.n_joints()
    }
    pub fn nv(&self) -> usize {
        self.nv_base() + self.n_joints()
    }
    /// Parent body of body `i ≥ 1`.
    #[inline]
    pub fn parent(&self, body: usize) -> usize {
        self.joints[body - 1].parent
    }
    pub fn joint_names(&self) -> Vec<&str> {
        self.joints.iter().map(|j| j.name.as_str()).collect()
    }
    pub fn joint_index(&self, name: &str) -> Option<usize> {
        self.joints.iter().position(|j| j.name == name)
    }
    pub fn frame_index(&self, name: &str) -> Option<usize> {
        self.frames.iter().position(|f| f.name == name)
    }
    pub fn total_mass(&self) -> f64 {
        self.inertias.iter().map(|i| i.mass).sum()
    }
    /// Whether `ancestor` is `body` or lies on its path to the root.
    pub fn is_ancestor(&self, ancestor: usize, mut body: usize) -> bool {
        loop {
            if body == ancestor {
                return true;
            }
            if body == 0 {
                return false;
            }
            body = self.parent(body);
        }
    }

    /// The neutral configuration: base at the origin with identity orientation, joints at 0
    /// clamped into their limits.
    pub fn neutral(&self) -> nalgebra::DVector<f64> {
        let mut q = nalgebra::DVector::zeros(self.nq());
        if self.root == RootKind::Floating {
            q[6] = 1.0;
        }
        for (k, j) in self.joints.iter().enumerate() {
            q[self.nq_base() + k] = 0.0f64.clamp(j.lower, j.upper);
        }
        q
    }

    /// Build from URDF text.
    pub fn from_urdf_str(text: &str, root: RootKind) -> Result<Model, ModelError> {
        Self::from_urdf(&parse_urdf(text)?, root)
    }

    pub fn from_urdf(robot: &urdf_rs::Robot, root: RootKind) -> Result<Model, ModelError> {
        build_from_urdf(robot, root)
    }
}

/// Parse URDF text. The parser's own messages carry no position (it re-serialises the XML
/// before decoding it), so on failure the text is read again with a position-aware XML reader
/// to say where: an XML syntax error, an unsupported joint type, or an attribute that is not a
/// number, each with its line and the link or joint it is in.
pub fn parse_urdf(text: &str) -> Result<urdf_rs::Robot, ModelError> {
    check_urdf_depth(text)?;
    urdf_rs::read_from_string(text).map_err(|e| {
        let raw = e.to_string();
        let raw = raw.strip_prefix("custom: ").unwrap_or(&raw);
        ModelError(
            locate_urdf_problem(text).unwrap_or_else(|| format!("not a readable URDF: {raw}")),
        )
    })
}

/// Deepest element nesting accepted in a URDF. A URDF is shallow (robot → link → inertial →
/// origin is 4 deep); the parser behind `urdf_rs` recurses per level, so tens of thousands of
/// nested elements would overflow the stack.
pub const MAX_URDF_DEPTH: usize = 64;

/// Refuse nesting deeper than [`MAX_URDF_DEPTH`] with a streaming (non-recursive) XML reader,
/// before the recursive parser sees the text. Syntax errors are left to [`parse_urdf`].
fn check_urdf_depth(text: &str) -> Result<(), ModelError> {
    use xml::reader::{EventReader, XmlEvent};
    let mut reader = EventReader::new(text.as_bytes());
    let mut depth = 0usize;
    loop {
        match reader.next() {
            Ok(XmlEvent::StartElement { name, .. }) => {
                depth += 1;
                if depth > MAX_URDF_DEPTH {
                    use xml::common::Position;
                    return Err(ModelError(format!(
                        "line {}: element <{}> nested {depth} deep: allowed: at most {MAX_URDF_DEPTH} levels",
                        reader.position().row + 1,
                        name.local_name
                    )));
                }
            }
            Ok(XmlEvent::EndElement { .. }) => depth = depth.saturating_sub(1),
            Ok(XmlEvent::EndDocument) | Err(_) => return Ok(()),
            Ok(_) => {}
        }
    }
}

/// Attributes that hold numbers (one or three), by element.
const NUMERIC_ATTRIBUTES: &[(&str, &[&str])] = &[
    ("origin", &["xyz", "rpy"]),
    ("axis", &["xyz"]),
    ("mass", &["value"]),
    ("inertia", &["ixx", "ixy", "ixz", "iyy", "iyz", "izz"]),
    ("limit", &["lower", "upper", "effort", "velocity"]),
];

fn locate_urdf_problem(text: &str) -> Option<String> {
    use xml::common::Position;
    use xml::reader::{EventReader, XmlEvent};
    let mut reader = EventReader::new(text.as_bytes());
    // The innermost <link> or <joint> being read, for context.
    let mut owner = String::from("the URDF");
    loop {
        let event = match reader.next() {
            Ok(event) => event,
            Err(e) => {
                let pos = e.position();
                return Some(format!(
                    "not well-formed XML at line {}, column {}: {}",
                    pos.row + 1,
                    pos.column + 1,
                    e.msg()
                ));
            }
        };
        let line = reader.position().row + 1;
        match event {
            XmlEvent::StartElement {
                name, attributes, ..
            } => {
                let attr = |key: &str| {
                    attributes
                        .iter()
                        .find(|a| a.name.local_name == key)
                        .map(|a| a.value.as_str())
                };
                let tag = name.local_name.as_str();
                if tag == "link" || tag == "joint" {
                    owner = format!("{tag} '{}'", attr("name").unwrap_or("(no name)"));
                }
                if tag == "joint" {
                    let kind = attr("type").unwrap_or("");
                    if !["revolute", "continuous", "prismatic", "fixed"].contains(&kind) {
                        return Some(format!(
                            "line {line}: {owner} has type '{kind}', which is not supported; allowed: revolute, continuous, prismatic, fixed"
                        ));
                    }
                }
                let numeric = NUMERIC_ATTRIBUTES
                    .iter()
                    .find(|(t, _)| *t == tag)
                    .map_or(&[][..], |(_, keys)| *keys);
                for key in numeric {
                    if let Some(value) = attr(key)
                        && value.split_whitespace().any(|x| x.parse::<f64>().is_err())
                    {
                        return Some(format!(
                            "line {line}: {owner}: <{tag} {key}=\"{value}\"> is not a number (or list of numbers)"
                        ));
                    }
                }
            }
            XmlEvent::EndDocument => return None,
            _ => {}
        }
    }
}

fn finite3(v: &[f64; 3], what: &str) -> Result<Vec3, ModelError> {
    if v.iter().all(|x| x.is_finite()) {
        Ok(Vec3::new(v[0], v[1], v[2]))
    } else {
        err(format!("{what} has a non-finite number: {v:?}"))
    }
}

fn urdf_pose(p: &urdf_rs::Pose, what: &str) -> Result<Pose, ModelError> {
    let xyz = finite3(&p.xyz, &format!("{what} origin xyz"))?;
    let rpy = finite3(&p.rpy, &format!("{what} origin rpy"))?;
    Ok(Pose::from_xyz_rpy(xyz.into(), rpy.into()))
}

/// A link's inertial as a spatial inertia about the link frame, with its physical checks:
/// mass ≥ 0, inertia symmetric positive semi-definite with principal moments satisfying the
/// triangle inequality (Traversaro et al., "Identification of fully physical consistent
/// inertial parameters using optimization on manifolds", IROS 2016).
fn link_inertia(link: &urdf_rs::Link) -> Result<Inertia, ModelError> {
    let what = format!("link '{}'", link.name);
    let inl = &link.inertial;
    let m = inl.mass.value;
    let i = &inl.inertia;
    let vals = [m, i.ixx, i.ixy, i.ixz, i.iyy, i.iyz, i.izz];
    if vals.iter().any(|x| !x.is_finite()) {
        return err(format!("{what}: <inertial> has a non-finite number"));
    }
    if m < 0.0 {
        return err(format!(
            "{what}: <inertial> mass {m} is negative; allowed: mass ≥ 0 kg"
        ));
    }
    let i_c = Mat3::new(
        i.ixx, i.ixy, i.ixz, i.ixy, i.iyy, i.iyz, i.ixz, i.iyz, i.izz,
    );
    let eig = i_c.symmetric_eigenvalues();
    let scale = eig.amax().max(1e-12);
    if eig.iter().any(|&e| e < -1e-9 * scale) {
        return err(format!(
            "{what}: <inertia> is not positive semi-definite (principal moments {:.6e}, {:.6e}, {:.6e})",
            eig[0], eig[1], eig[2]
        ));
    }
    for k in 0..3 {
        let (a, b, c) = (eig[k], eig[(k + 1) % 3], eig[(k + 2) % 3]);
        if a > b + c + 1e-9 * scale {
            return err(format!(
                "{what}: <inertia> principal moments {a:.6e}, {b:.6e}, {c:.6e} violate the triangle inequality (no physical body has them)"
            ));
        }
    }
    if m == 0.0 && eig.amax() > 0.0 {
        return err(format!(
            "{what}: <inertial> has rotational inertia but zero mass"
        ));
    }
    let origin = urdf_pose(&inl.origin, &format!("{what} <inertial>"))?;
    // Inertia tensor given in the inertial frame; rotate it into the link frame.
    let i_link = origin.rot * i_c * origin.rot.transpose();
    Ok(Inertia::from_com(m, origin.trans, i_link))
}

fn build_from_urdf(robot: &urdf_rs::Robot, root: RootKind) -> Result<Model, ModelError> {
    if robot.links.is_empty() {
        return err("the URDF has no <link>");
    }
    let mut link_ix: HashMap<&str, usize> = HashMap::new();
    for (k, l) in robot.links.iter().enumerate() {
        if link_ix.insert(l.name.as_str(), k).is_some() {
            return err(format!("link '{}' is defined twice", l.name));
        }
    }
    // Parent joint of every link; a second parent means a closed loop.
    let mut parent_joint: Vec<Option<usize>> = vec![None; robot.links.len()];
    let mut children: Vec<Vec<usize>> = vec![Vec::new(); robot.links.len()];
    let mut joint_names = HashMap::new();
    for (k, j) in robot.joints.iter().enumerate() {
        if joint_names.insert(j.name.as_str(), k).is_some() {
            return err(format!("joint '{}' is defined twice", j.name));
        }
        let Some(&p) = link_ix.get(j.parent.link.as_str()) else {
            return err(format!(
                "joint '{}': parent link '{}' does not exist",
                j.name, j.parent.link
            ));
        };
        let Some(&c) = link_ix.get(j.child.link.as_str()) else {
            return err(format!(
                "joint '{}': child link '{}' does not exist",
                j.name, j.child.link
            ));
        };
        if let Some(other) = parent_joint[c] {
            return err(format!(
                "link '{}' is the child of both joint '{}' and joint '{}': closed kinematic loops are not supported (a tree is required)",
                j.child.link, robot.joints[other].name, j.name
            ));
        }
        parent_joint[c] = Some(k);
        children[p].push(k);
    }
    let roots: Vec<usize> = (0..robot.links.len())
        .filter(|&l| parent_joint[l].is_none())
        .collect();
    match roots.len() {
        0 => return err("every link has a parent joint: the joints form a closed loop"),
        1 => {}
        _ => {
            let names: Vec<&str> = roots
                .iter()
                .map(|&l| robot.links[l].name.as_str())
                .collect();
            return err(format!(
                "the URDF has {} root links ({}): one tree with a single root is required",
                names.len(),
                names.join(", ")
            ));
        }
    }

    let mut model = Model {
        name: robot.name.clone(),
        root,
        fixed_base_pose: Pose::IDENTITY,
        body_names: Vec::new(),
        inertias: Vec::new(),
        joints: Vec::new(),
        frames: Vec::new(),
        gravity: Vec3::new(0.0, 0.0, -9.81),
    };
    let root_link = roots[0];
    model.body_names.push(robot.links[root_link].name.clone());
    model.inertias.push(link_inertia(&robot.links[root_link])?);
    model.frames.push(Frame {
        name: robot.links[root_link].name.clone(),
        body: 0,
        placement: Pose::IDENTITY,
    });

    // Depth-first walk over joints; a body index is assigned when its joint is popped, so a
    // parent's index is always below its children's. Stack entries: (joint, the body its parent
    // link belongs to, the parent link's placement in that body).
    let mut visited = vec![false; robot.links.len()];
    visited[root_link] = true;
    let mut stack: Vec<(usize, usize, Pose)> = children[root_link]
        .iter()
        .rev()
        .map(|&jk| (jk, 0, Pose::IDENTITY))
        .collect();
    while let Some((jk, body, placement)) = stack.pop() {
        let j = &robot.joints[jk];
        let child = link_ix[j.child.link.as_str()];
        if visited[child] {
            return err(format!("joint '{}' closes a kinematic loop", j.name));
        }
        visited[child] = true;
        let origin = placement.compose(&urdf_pose(&j.origin, &format!("joint '{}'", j.name))?);
        let child_inertia = link_inertia(&robot.links[child])?;
        let kind = match j.joint_type {
            urdf_rs::JointType::Fixed => None,
            urdf_rs::JointType::Revolute | urdf_rs::JointType::Continuous => {
                Some(JointKind::Revolute)
            }
            urdf_rs::JointType::Prismatic => Some(JointKind::Prismatic),
            ref other => {
                return err(format!(
                    "joint '{}' has type '{}', which is not supported; allowed: revolute, continuous, prismatic, fixed",
                    j.name,
                    format!("{other:?}").to_lowercase()
                ));
            }
        };
        let (child_body, child_placement) = match kind {
            None => {
                // Fixed joint: merge the child's inertia into this body and keep its frame.
                model.inertias[body] = model.inertias[body].add(&child_inertia.to_parent(&origin));
                model.frames.push(Frame {
                    name: j.child.link.clone(),
                    body,
                    placement: origin,
                });
                (body, origin)
            }
            Some(kind) => {
                let axis = finite3(&j.axis.xyz, &format!("joint '{}' axis", j.name))?;
                let n = axis.norm();
                if n < 1e-9 {
                    return err(format!("joint '{}': axis has zero length", j.name));
                }
                let lim = &j.limit;
                for (name, val) in [("effort", lim.effort), ("velocity", lim.velocity)] {
                    if !val.is_finite() || val < 0.0 {
                        return err(format!(
                            "joint '{}': <limit {name}=\"{val}\"> must be a finite number ≥ 0",
                            j.name
                        ));
                    }
                }
                let (lower, upper) = if j.joint_type == urdf_rs::JointType::Continuous {
                    (f64::NEG_INFINITY, f64::INFINITY)
                } else {
                    if !lim.lower.is_finite() || !lim.upper.is_finite() || lim.lower > lim.upper {
                        return err(format!(
                            "joint '{}': <limit lower=\"{}\" upper=\"{}\"> must be finite with lower ≤ upper",
                            j.name, lim.lower, lim.upper
                        ));
                    }
                    (lim.lower, lim.upper)
                };
                let new_body = model.inertias.len();
                model.joints.push(Joint {
                    name: j.name.clone(),
                    kind,
                    axis: axis / n,
                    parent: body,
                    x_tree: origin,
                    lower,
                    upper,
                    velocity_limit: lim.velocity,
                    effort_limit: lim.effort,
                    armature: 0.0,
                });
                model.body_names.push(j.child.link.clone());
                model.inertias.push(child_inertia);
                model.frames.push(Frame {
                    name: j.child.link.clone(),
                    body: new_body,
                    placement: Pose::IDENTITY,
                });
                (new_body, Pose::IDENTITY)
            }
        };
        for &ck in children[child].iter().rev() {
            stack.push((ck, child_body, child_placement));
        }
    }
    if let Some(l) = (0..robot.links.len()).find(|&l| !visited[l]) {
        return err(format!(
            "link '{}' is not connected to the root link",
            robot.links[l].name
        ));
    }
    // Every body that moves must carry mass, or M is singular.
    for (b, i) in model.inertias.iter().enumerate() {
        let moves = b > 0 || root == RootKind::Floating;
        if moves && (i.mass <= 0.0) {
            return err(format!(
                "link '{}' has no mass (missing or zero <inertial>, fixed children included): every moving body needs mass > 0",
                model.body_names[b]
            ));
        }
    }
    Ok(model)
}
