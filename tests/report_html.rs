//! The two HTML pages: `report.html` of a run folder and the replay page `trace` writes.
//!
//! - The replay's feet positions and forces at three instants equal the trace CSV's values bit
//!   for bit (the page's embedded JSON parsed back).
//! - Neither page refers to anything outside itself: no `src`/`href` to http(s), no `//host`
//!   URLs, no `@import` or `url(` in the styles.
//! - `report.html` of a run folder the size of the default study (900 runs) stays under the
//!   stated budget ([`BUDGET_BYTES`]) and holds, before any script, a verdict per law and
//!   the outcome map.

use std::fs;
use std::path::{Path, PathBuf};

use gripsweep::cli_run::{TraceArgs, cmd_trace};
use gripsweep::report::{REPORT_HTML, write_report};

/// The size budget of `report.html` for the default study, stated in the README: small enough
/// to attach to an email.
const BUDGET_BYTES: u64 = 1_000_000;

struct TempDir(PathBuf);

impl TempDir {
    fn new(name: &str) -> TempDir {
        let nanos = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_nanos())
            .unwrap_or(0);
        let dir = std::env::temp_dir().join(format!(
            "gripsweep-html-{name}-{}-{nanos}",
            std::process::id()
        ));
        fs::create_dir_all(&dir).expect("create temp folder");
        TempDir(dir)
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = fs::remove_dir_all(&self.0);
    }
}

/// Every place a page could make the browser fetch something from elsewhere.
fn external_refs(html: &str) -> Vec<String> {
    let lower = html.to_ascii_lowercase();
    let mut found = Vec::new();
    for pat in [
        "src=\"http",
        "href=\"http",
        "src='http",
        "href='http",
        "src=\"//",
        "href=\"//",
        "@import",
        "url(",
        "<link",
        "<iframe",
        "<img",
    ] {
        if let Some(i) = lower.find(pat) {
            found.push(html[i..(i + 60).min(html.len())].to_string());
        }
    }
    found
}

/// The JSON embedded in the replay page.
fn replay_data(html: &str) -> serde_json::Value {
    let open = "<script type=\"application/json\" id=\"replay-data\">";
    let start = html.find(open).expect("replay data element") + open.len();
    let end = start + html[start..].find("</script>").expect("end of replay data");
    serde_json::from_str(&html[start..end]).expect("replay data is JSON")
}

#[test]
fn replay_feet_equal_trace_csv() {
    let dir = TempDir::new("replay");
    let csv_path = dir.0.join("cell.csv");
    let scenario = Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios/quick.toml");
    let text = cmd_trace(&TraceArgs {
        scenario: Some(scenario),
        pick: vec![
            "slope_deg=10".into(),
            "mu=0.3".into(),
            "controller=force-cost-id-load".into(),
        ],
        out: csv_path.clone(),
        every: 25,
        no_replay: false,
    })
    .unwrap_or_else(|e| panic!("trace: {}", e.message));
    let page_path = dir.0.join("cell.html");
    assert!(text.contains("replay in"), "{text}");
    let html = fs::read_to_string(&page_path).expect("replay page written");
    assert_eq!(external_refs(&html), Vec::<String>::new());
    let data = replay_data(&html);
    let frames = data["frames"].as_array().expect("frames");

    let mut rdr = csv::Reader::from_path(&csv_path).expect("trace CSV");
    let head: Vec<String> = rdr
        .headers()
        .expect("header")
        .iter()
        .map(str::to_string)
        .collect();
    let rows: Vec<csv::StringRecord> = rdr.records().map(|r| r.expect("row")).collect();
    assert_eq!(frames.len(), rows.len(), "one frame per CSV row");
    // 8 s of the quick scenario at the default plant step, a row every 25 steps.
    let dt = gripsweep::plant::PlantSettings::default().dt;
    assert_eq!(rows.len(), (8.0 / (25.0 * dt)).round() as usize);
    let col = |name: &str| {
        head.iter()
            .position(|h| h == name)
            .unwrap_or_else(|| panic!("column {name}"))
    };
    let feet: Vec<String> = data["feet"]
        .as_array()
        .expect("feet")
        .iter()
        .map(|f| f.as_str().expect("foot name").to_string())
        .collect();
    assert_eq!(feet.len(), 4);
    let mut compared = 0;
    let mut stance_seen = (false, false);
    for k in [0, rows.len() / 2, rows.len() - 1] {
        let row = &rows[k];
        let frame = &frames[k];
        let csv_num = |name: &str| -> f64 {
            row[col(name)]
                .parse()
                .unwrap_or_else(|_| panic!("{name} is a number"))
        };
        assert_eq!(
            frame["t"].as_f64().expect("t").to_bits(),
            csv_num("t_s").to_bits()
        );
        for (i, foot) in feet.iter().enumerate() {
            let f = &frame["feet"][i];
            for (j, c) in ["x_m", "y_m", "z_m"].iter().enumerate() {
                let page = f["p"][j].as_f64().expect("position");
                assert_eq!(page.to_bits(), csv_num(&format!("{foot}_{c}")).to_bits());
                compared += 1;
            }
            for (j, c) in ["fn_n", "ft1_n", "ft2_n"].iter().enumerate() {
                let page = f["f"][j].as_f64().expect("force");
                assert_eq!(page.to_bits(), csv_num(&format!("{foot}_{c}")).to_bits());
                let pred = f["pf"][j].as_f64().expect("predicted force");
                assert_eq!(
                    pred.to_bits(),
                    csv_num(&format!("{foot}_pred_{c}")).to_bits()
                );
                compared += 2;
            }
            // Swing feet: blank slip in the CSV, null in the page.
            let stance = &row[col(&format!("{foot}_stance"))] == "1";
            let slip = &row[col(&format!("{foot}_slip_speed_mm_s"))];
            if stance {
                stance_seen.0 = true;
                let v: f64 = slip.parse().expect("stance slip is a number");
                assert_eq!(f["v"].as_f64().expect("slip").to_bits(), v.to_bits());
            } else {
                stance_seen.1 = true;
                assert_eq!(slip, "", "a swing foot's slip speed is blank");
                assert!(f["v"].is_null());
            }
        }
    }
    assert_eq!(compared, 3 * 4 * 9);
    assert!(stance_seen.0, "some stance foot among the three instants");
    // A standing foot carries weight: the sum of normal forces at the middle instant is of
    // the order of the robot's weight (not zeros written by mistake).
    let mid = &frames[rows.len() / 2]["feet"];
    let fn_sum: f64 = (0..4).map(|i| mid[i]["f"][0].as_f64().unwrap_or(0.0)).sum();
    assert!(fn_sum > 20.0, "normal forces sum to {fn_sum} N");
    // The plan's references are in the CSV and differ from the state (tracking is not exact).
    let r = &rows[rows.len() / 2];
    let a: f64 = r[col("fl_knee_rad")].parse().expect("knee");
    let b: f64 = r[col("fl_knee_ref_rad")].parse().expect("knee ref");
    assert!(a.is_finite() && b.is_finite() && a != b);
    for c in ["base_vx_m_s", "base_wz_rad_s", "plan_base_z_m"] {
        let _ = col(c);
    }
    // The page states the frame count the CSV has.
    assert!(html.contains(&format!("data-frames=\"{}\"", rows.len())));
}

const HEADER: &str = "cell_id,index,slope_deg,mu,rate_hz,actuator,controller,mass_scale,com_shift_mm,sensor_noise,seed,status,message,sim_time_s,slip_mean_mm,slip_max_mm,slip_total_mm,stance_phases,base_pos_rms_mm,base_orient_rms_deg,joint_rms_deg,progress_m,progress_planned_m,torque_rms_nm,torque_peak_nm,torque_limit_share,energy_j,friction_use_max,friction_over_share,law_trouble_share";

#[test]
fn report_html_default_study_shape_within_budget() {
    let dir = TempDir::new("report");
    let ctrls = [
        "stiff-pd",
        "min-torque-id",
        "force-cost-id",
        "force-cost-id-load",
        "cone-program",
    ];
    let mut csv_text = format!("{HEADER}\n");
    let mut index = 0u64;
    // The default study's matrix: 4 slopes × 5 μ × 3 rates × 3 actuators × 5 laws, 1 seed.
    for slope in [0.0, 10.0, 20.0, 25.0] {
        for mu in [0.2, 0.4, 0.6, 0.8, 1.0] {
            for rate in [100.0, 250.0, 1000.0] {
                for act in ["ideal", "open-current", "torque-loop"] {
                    for (ci, ctrl) in ctrls.iter().enumerate() {
                        let fell = slope >= 20.0 && mu <= 0.4 && ci != 3;
                        let (status, msg) = if fell {
                            ("fell", "trunk tilted 50° at t = 2.000 s")
                        } else {
                            ("ok", "")
                        };
                        let slip = 0.2 + slope / 20.0 / mu * (1.0 + ci as f64 * 0.3);
                        csv_text.push_str(&format!(
                            "{:016x},{index},{slope},{mu},{rate},{act},{ctrl},1,0,0,0,{status},{msg},8,{slip},{},{},12,{},0.2,0.3,0.9,1.0,{},{},0.01,55,0.6,0,0\n",
                            0xcd00_0000_0000u64 + index,
                            slip * 2.5,
                            slip * 12.0,
                            3.0 + slip,
                            14.0 + slip,
                            40.0 + slip
                        ));
                        index += 1;
                    }
                }
            }
        }
    }
    fs::write(dir.0.join("cells.csv"), csv_text).expect("cells.csv");
    fs::write(
        dir.0.join("manifest.json"),
        "{\"scenario_name\": \"default\", \"slip_floor_mm\": 0.05, \"tool_version\": \"0.1.0\", \"seeds\": 1, \"axes\": {\"slope_deg\": [0, 10, 20, 25], \"mu\": [0.2, 0.4, 0.6, 0.8, 1.0], \"rate_hz\": [100, 250, 1000], \"actuator\": [\"ideal\", \"open-current\", \"torque-loop\"], \"controller\": [], \"mass_scale\": [1], \"com_shift_mm\": [0], \"sensor_noise\": [0]}, \"scenario_source\": \"scenarios/default.toml\", \"inputs\": {\"scenario\": {\"path\": \"scenarios/default.toml\", \"sha256\": \"00\"}}}",
    )
    .expect("manifest");
    // A tuning table as the tuning step writes it (its columns as of this writing); the page
    // shows it as written.
    fs::write(
        dir.0.join("gains.csv"),
        "law,rate_hz,actuator,s_critical,s_critical_bound,s_chosen,stiff_kp,stiff_kd,task_kp,task_kd,joint_kp,joint_kd,base_rms_mm,joint_rms_deg,torque_limit_share,target_joint_rms_deg,trials,reason,inputs_sha256\n\
stiff-pd,1000,ideal,1.5,upper,0.75,15000,22.5,,,,,3.1,0.02,0,0.5,9,margin 2,abc123\n",
    )
    .expect("gains.csv");
    let summary = write_report(&dir.0).expect("report");
    let path = dir.0.join(REPORT_HTML);
    assert!(summary.files.contains(&path));
    let size = fs::metadata(&path).expect("report.html").len();
    assert!(
        size < BUDGET_BYTES,
        "report.html is {size} bytes, budget {BUDGET_BYTES}"
    );
    let html = fs::read_to_string(&path).expect("read");
    assert_eq!(external_refs(&html), Vec::<String>::new());
    // Without JavaScript: everything up to the first script is the page a reader gets, and
    // it holds a verdict per law and the outcome map as inline SVG.
    let static_part = &html[..html.find("<script").expect("a script")];
    for c in ctrls {
        assert!(
            static_part.contains(&format!("class=\"card fell law-verdict\" data-law=\"{c}\""))
                || static_part
                    .contains(&format!("class=\"card held law-verdict\" data-law=\"{c}\""))
                || static_part.contains(&format!(
                    "class=\"card amber law-verdict\" data-law=\"{c}\""
                )),
            "verdict card for {c}"
        );
    }
    let map = static_part
        .find("data-figure=\"outcome_map\"")
        .expect("outcome map");
    assert!(static_part[map..].trim_start().contains("<svg"));
    // The outcome map over rate × actuator: 5 laws × 3 actuators rows; stiff-pd at 100 Hz
    // with the ideal actuator fell in 2 slopes × 2 μ = 4 of its 20 runs.
    let regime = &static_part[static_part
        .find("id=\"table-regime-map\"")
        .expect("regime map")..];
    let regime = &regime[..regime.find("</table>").expect("end of regime map")];
    assert_eq!(regime.matches("<tr><td>").count(), 5 * 3);
    assert!(regime.contains(
        "<tr><td>stiff-pd</td><td>ideal</td><td><span class=\"tally t-held\">16</span><span class=\"tally t-fell\">4</span></td>"
    ), "{regime}");
    // The falls are listed with a command that makes their replay.
    let gains = &static_part[static_part.find("id=\"table-gains\"").expect("gains table")..];
    assert!(gains.contains("<th class=\"num\">stiff_kp</th>"));
    assert!(gains.contains("<td>15000</td><td>22.5</td>"));
    // Axes with one value in the scenario (mass scale, CoM shift, noise, seed) are left out.
    assert!(
        static_part.contains(
            "gripsweep trace --pick slope_deg=25 --pick mu=0.2 --pick rate_hz=100 --pick actuator=ideal --pick controller=cone-program --out replay-"
        ),
        "trace command in {}",
        &static_part[static_part.find("gripsweep trace").unwrap_or(0)..][..300]
    );
    // 2 slopes × 2 μ × 9 regimes × 4 laws = 144 falls, more than the list's cap of 60: the
    // list is full of falls (most severe first) and says how many it left out.
    let watch = &static_part[static_part.find("id=\"table-watch\"").expect("watch list")..];
    let watch = &watch[..watch.find("</table>").expect("end of watch list")];
    assert_eq!(watch.matches("<tr><td>").count(), 60);
    assert_eq!(watch.matches("<td>fell <span").count(), 60);
    let left_out = 144 + 180 - 2 * 2 * 9 - 60;
    assert!(
        static_part.contains(&format!("{left_out} more runs are not listed")),
        "left-out count"
    );
    eprintln!("report.html for the default study's shape: {size} bytes");
}
