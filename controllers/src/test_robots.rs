//! Small URDFs for unit tests: each exercises a feature of the loader (offset centres of mass,
//! rotated joint origins, oblique axes, prismatic and fixed joints, branching).

/// A floating tree: a trunk with an offset COM, a two-joint branch with an oblique axis and a
/// rotated origin, a prismatic branch, and a massive fixed child.
pub const TWIG: &str = r#"<?xml version="1.0"?>
<robot name="twig">
  <link name="core">
    <inertial><origin xyz="0.02 -0.01 0.015" rpy="0.1 0.2 0.3"/><mass value="3.0"/>
      <inertia ixx="0.03" ixy="0.001" ixz="-0.002" iyy="0.05" iyz="0.0015" izz="0.06"/></inertial>
  </link>
  <link name="arm_a">
    <inertial><origin xyz="0.1 0.01 -0.02"/><mass value="0.7"/>
      <inertia ixx="0.002" ixy="0.0001" ixz="0" iyy="0.004" iyz="0.0002" izz="0.0035"/></inertial>
  </link>
  <link name="arm_b">
    <inertial><origin xyz="0.0 0.0 -0.12" rpy="0.3 0 0"/><mass value="0.4"/>
      <inertia ixx="0.0015" ixy="0" ixz="0" iyy="0.0016" iyz="0" izz="0.0004"/></inertial>
  </link>
  <link name="tip">
    <inertial><mass value="0.05"/><inertia ixx="1e-5" ixy="0" ixz="0" iyy="1e-5" iyz="0" izz="1e-5"/></inertial>
  </link>
  <link name="slider">
    <inertial><origin xyz="0 0.03 0"/><mass value="0.9"/>
      <inertia ixx="0.001" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.0025"/></inertial>
  </link>
  <link name="ballast">
    <inertial><origin xyz="0 0 -0.02"/><mass value="1.2"/>
      <inertia ixx="0.004" ixy="0" ixz="0" iyy="0.004" iyz="0" izz="0.003"/></inertial>
  </link>
  <link name="wheel">
    <inertial><mass value="0.3"/><inertia ixx="0.0006" ixy="0" ixz="0" iyy="0.0003" iyz="0" izz="0.0003"/></inertial>
  </link>
  <joint name="a_turn" type="revolute">
    <origin xyz="0.15 0.05 0.02" rpy="0.3 -0.2 0.5"/><parent link="core"/><child link="arm_a"/>
    <axis xyz="0.2 0.9 0.38"/><limit lower="-2" upper="2" effort="20" velocity="10"/>
  </joint>
  <joint name="b_turn" type="revolute">
    <origin xyz="0.2 0 0" rpy="0 0.4 0"/><parent link="arm_a"/><child link="arm_b"/>
    <axis xyz="0 1 0"/><limit lower="-2.5" upper="0" effort="20" velocity="10"/>
  </joint>
  <joint name="tip_mount" type="fixed">
    <origin xyz="0 0 -0.25"/><parent link="arm_b"/><child link="tip"/>
  </joint>
  <joint name="slide" type="prismatic">
    <origin xyz="-0.1 -0.05 0" rpy="0 0 -0.7"/><parent link="core"/><child link="slider"/>
    <axis xyz="1 0 0"/><limit lower="-0.1" upper="0.1" effort="50" velocity="1"/>
  </joint>
  <joint name="ballast_mount" type="fixed">
    <origin xyz="0 0 -0.08" rpy="0.2 0 0"/><parent link="core"/><child link="ballast"/>
  </joint>
  <joint name="spin" type="continuous">
    <origin xyz="0 0.1 -0.05" rpy="1.5707963267948966 0 0"/><parent link="ballast"/><child link="wheel"/>
    <axis xyz="1 0 0"/><limit effort="5" velocity="30"/>
  </joint>
</robot>
"#;

/// Two-link planar arm turning about z (Spong, Hutchinson & Vidyasagar, "Robot Modeling and
/// Control", Wiley 2006, §7.3.2): link lengths l1, l2, centres of mass at lc1, lc2 along each
/// link, masses m1, m2, inertias I1, I2 about the z axis through each centre of mass.
pub fn planar_arm(l1: f64, lc1: f64, lc2: f64, m1: f64, m2: f64, i1: f64, i2: f64) -> String {
    format!(
        r#"<robot name="planar_arm">
  <link name="ground"><inertial><mass value="1"/><inertia ixx="1" ixy="0" ixz="0" iyy="1" iyz="0" izz="1"/></inertial></link>
  <link name="upper"><inertial><origin xyz="{lc1} 0 0"/><mass value="{m1}"/>
    <inertia ixx="{i1}" ixy="0" ixz="0" iyy="{i1}" iyz="0" izz="{i1}"/></inertial></link>
  <link name="fore"><inertial><origin xyz="{lc2} 0 0"/><mass value="{m2}"/>
    <inertia ixx="{i2}" ixy="0" ixz="0" iyy="{i2}" iyz="0" izz="{i2}"/></inertial></link>
  <joint name="shoulder" type="continuous"><parent link="ground"/><child link="upper"/><axis xyz="0 0 1"/><limit effort="100" velocity="10"/></joint>
  <joint name="elbow" type="continuous"><origin xyz="{l1} 0 0"/><parent link="upper"/><child link="fore"/><axis xyz="0 0 1"/><limit effort="100" velocity="10"/></joint>
</robot>"#
    )
}
