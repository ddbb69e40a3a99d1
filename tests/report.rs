//! The report end to end on hand-made run folders: every output present and well-formed,
//! numbers equal to hand-computed means and intervals, the slip-floor rule, skipped figures,
//! and clear errors on malformed input.

use std::fs;
use std::path::{Path, PathBuf};

use gripsweep::report::{ReportSummary, write_report};

/// A temporary run folder, removed when dropped (also when a check fails).
struct RunDir(PathBuf);

impl RunDir {
    fn new(name: &str) -> RunDir {
        let nanos = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_nanos())
            .unwrap_or(0);
        let dir = std::env::temp_dir().join(format!(
            "gripsweep-report-{name}-{}-{nanos}",
            std::process::id()
        ));
        fs::create_dir_all(&dir).expect("create temp run folder");
        RunDir(dir)
    }

    fn path(&self) -> &Path {
        &self.0
    }

    fn write(&self, file: &str, text: &str) {
        fs::write(self.0.join(file), text).expect("write input file");
    }

    fn read(&self, file: &str) -> String {
        fs::read_to_string(self.0.join(file)).unwrap_or_else(|e| panic!("read {file}: {e}"))
    }
}

impl Drop for RunDir {
    fn drop(&mut self) {
        // GRIPSWEEP_KEEP_REPORTS=1 keeps the folders, to look at the figures by eye.
        if std::env::var_os("GRIPSWEEP_KEEP_REPORTS").is_some() {
            eprintln!("kept {}", self.0.display());
        } else {
            let _ = fs::remove_dir_all(&self.0);
        }
    }
}

const HEADER: &str = "cell_id,index,slope_deg,mu,rate_hz,actuator,controller,mass_scale,com_shift_mm,sensor_noise,seed,status,message,sim_time_s,slip_mean_mm,slip_max_mm,slip_total_mm,stance_phases,base_pos_rms_mm,base_orient_rms_deg,joint_rms_deg,progress_m,progress_planned_m,torque_rms_nm,torque_peak_nm,torque_limit_share,energy_j,friction_use_max,friction_over_share,law_trouble_share";

/// One cell as the runner would write it; metrics other than slip and tracking are derived
/// from the slip so every column is filled.
struct C<'a> {
    slope: f64,
    mu: f64,
    rate: f64,
    actuator: &'a str,
    controller: &'a str,
    seed: u64,
    status: &'a str,
    message: &'a str,
    slip: f64,
    track: f64,
}

fn row(index: usize, c: &C) -> String {
    let msg = if c.message.contains(',') || c.message.contains('"') {
        format!("\"{}\"", c.message.replace('"', "\"\""))
    } else {
        c.message.to_string()
    };
    format!(
        "{:016x},{index},{},{},{},{},{},1,0,0,{},{},{msg},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
        0xab00_0000_0000u64 + index as u64,
        c.slope,
        c.mu,
        c.rate,
        c.actuator,
        c.controller,
        c.seed,
        c.status,
        if c.status == "fell" { 3.5 } else { 8.0 },
        c.slip,
        c.slip * 2.5,
        c.slip * 12.0,
        12,
        c.track,
        c.track / 20.0,
        c.track / 10.0,
        0.9,
        1.0,
        14.0 + c.slip,
        40.0 + c.slip,
        0.01,
        55.0,
        0.6,
        0.0,
        0.0
    )
}

fn cells_csv(cells: &[C]) -> String {
    let mut s = String::from(HEADER);
    s.push('\n');
    for (i, c) in cells.iter().enumerate() {
        s.push_str(&row(i, c));
        s.push('\n');
    }
    s
}

fn manifest(floor: f64) -> String {
    format!(
        "{{\"scenario_name\": \"test-slopes\", \"slip_floor_mm\": {floor}, \"tool_version\": \"0.1.0\", \"seeds\": 3}}"
    )
}

/// Width and height from a PNG's IHDR chunk, after checking the signature.
fn png_size(path: &Path) -> (u32, u32) {
    let bytes = fs::read(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    assert!(
        bytes.len() > 33,
        "{} is too short for a PNG",
        path.display()
    );
    assert_eq!(
        &bytes[..8],
        &[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A],
        "{}: not a PNG signature",
        path.display()
    );
    assert_eq!(
        &bytes[12..16],
        b"IHDR",
        "{}: first chunk is not IHDR",
        path.display()
    );
    let be = |b: &[u8]| u32::from_be_bytes([b[0], b[1], b[2], b[3]]);
    (be(&bytes[16..20]), be(&bytes[20..24]))
}

fn svg_size(text: &str) -> (u32, u32) {
    let attr = |name: &str| -> u32 {
        let key = format!("{name}=\"");
        let start = text
            .find(&key)
            .map(|i| i + key.len())
            .expect("svg size attribute");
        let end = text[start..].find('"').expect("closing quote") + start;
        text[start..end].parse().expect("numeric svg size")
    };
    (attr("width"), attr("height"))
}

/// The Markdown table row that starts with `| {first} |` under the heading `heading`.
fn md_row<'a>(md: &'a str, heading: &str, first: &str) -> &'a str {
    let start = md
        .find(heading)
        .unwrap_or_else(|| panic!("no heading {heading:?} in summary.md"));
    let prefix = format!("| {first} |");
    md[start..]
        .lines()
        .find(|l| l.starts_with(&prefix))
        .unwrap_or_else(|| panic!("no row {prefix:?} under {heading:?}"))
}

/// The `summary.csv` row with the given table, key columns and controller/metric.
fn csv_row(csv_text: &str, want: &[(&str, &str)]) -> Vec<String> {
    let mut lines = csv_text.lines();
    let header: Vec<&str> = lines.next().expect("header").split(',').collect();
    let col = |n: &str| header.iter().position(|h| *h == n).expect("column");
    for line in lines {
        let f: Vec<&str> = line.split(',').collect();
        if want.iter().all(|(k, v)| f.get(col(k)) == Some(v)) {
            return f.iter().map(|s| s.to_string()).collect();
        }
    }
    panic!("no summary.csv row with {want:?}");
}

fn csv_field(csv_text: &str, row: &[String], name: &str) -> String {
    let header: Vec<&str> = csv_text
        .lines()
        .next()
        .expect("header")
        .split(',')
        .collect();
    let i = header.iter().position(|h| *h == name).expect("column");
    row[i].clone()
}

fn check_outputs(run: &RunDir, summary: &ReportSummary, expected_plots: &[&str]) {
    for f in ["summary.md", "summary.csv"] {
        let len = fs::metadata(run.path().join(f))
            .map(|m| m.len())
            .unwrap_or(0);
        assert!(len > 100, "{f} missing or empty");
    }
    for stem in expected_plots {
        let svg_path = run.path().join("plots").join(format!("{stem}.svg"));
        let png_path = run.path().join("plots").join(format!("{stem}.png"));
        let svg =
            fs::read_to_string(&svg_path).unwrap_or_else(|e| panic!("{}: {e}", svg_path.display()));
        assert!(svg.contains("<svg"), "{stem}.svg is not SVG");
        let image = summary
            .images
            .iter()
            .find(|i| i.path == png_path)
            .unwrap_or_else(|| panic!("{stem}.png not in the summary"));
        let size = png_size(&png_path);
        assert_eq!(size, (image.width, image.height), "{stem}.png size");
        assert!(size.0 >= 700 && size.1 >= 300, "{stem}.png is {size:?}");
        assert_eq!(svg_size(&svg), size, "{stem}: SVG and PNG sizes differ");
        // A drawn PNG of this size compresses to well over a few kB (text, lines, fills).
        let png_len = fs::metadata(&png_path).map(|m| m.len()).unwrap_or(0);
        assert!(png_len > 5_000, "{stem}.png is only {png_len} bytes");
        assert!(summary.files.contains(&svg_path) && summary.files.contains(&png_path));
    }
}

/// Three controllers on one slope, two μ values, three seeds: small enough to compute every
/// checked number by hand.
fn small_run(floor: f64) -> (RunDir, Vec<C<'static>>) {
    let run = RunDir::new("small");
    let mut cells = Vec::new();
    // (μ, controller, per-seed slip)
    let slips: [(f64, &str, [f64; 3]); 6] = [
        (0.4, "stiff-pd", [1.0, 2.0, 4.0]),
        (0.4, "force-cost-id", [2.0, 2.5, 3.0]),
        (0.4, "cone-program", [5.0, 6.0, 7.0]),
        (0.9, "stiff-pd", [1.0, 1.0, 1.0]),
        (0.9, "force-cost-id", [1.5, 1.5, 1.5]),
        (0.9, "cone-program", [9.0, 3.0, 3.2]),
    ];
    for (mu, ctrl, values) in slips {
        for (seed, slip) in values.into_iter().enumerate() {
            let fell = mu == 0.9 && ctrl == "cone-program" && seed == 0;
            cells.push(C {
                slope: 5.0,
                mu,
                rate: 1000.0,
                actuator: "ideal",
                controller: ctrl,
                seed: seed as u64,
                status: if fell { "fell" } else { "ok" },
                message: if fell {
                    "trunk low, tilt 48 deg at t=3.5 s"
                } else {
                    ""
                },
                slip,
                track: 10.0 + slip,
            });
        }
    }
    run.write("cells.csv", &cells_csv(&cells));
    run.write("manifest.json", &manifest(floor));
    (run, cells)
}

#[test]
fn report_small_run_numbers_and_floor_rule() {
    let (run, _) = small_run(0.2);
    // A NaN in an ok cell's metric must be read, and left out of that metric only.
    let text = run.read("cells.csv");
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let mut f: Vec<String> = lines[4].split(',').map(str::to_string).collect();
    f[15] = "NaN".to_string(); // slip_max_mm of force-cost-id, μ 0.4, seed 0
    lines[4] = f.join(",");
    run.write("cells.csv", &(lines.join("\n") + "\n"));

    let summary = write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(summary.cells, 18);
    assert_eq!(
        summary.controllers,
        ["stiff-pd", "force-cost-id", "cone-program"]
    );
    check_outputs(
        &run,
        &summary,
        &["slip_vs_friction", "tracking_vs_friction"],
    );

    let md = run.read("summary.md");
    assert!(md.starts_with("# test-slopes"), "title names the scenario");
    assert!(
        md.contains("Slip floor of this run: 0.200 mm"),
        "floor stated"
    );

    // stiff-pd at μ 0.4: seeds 1, 2, 4 → mean 7/3, s = √(7/3), h = t(0.975, 2)·s/√3.
    let mean = 7.0f64 / 3.0;
    let half = 4.303 * (7.0f64 / 3.0).sqrt() / 3.0f64.sqrt();
    let expected = format!("{mean:.2} ± {half:.2}");
    assert_eq!(expected, "2.33 ± 3.79");
    let r = md_row(&md, "### Slope 5°", "0.4");
    assert!(r.contains(&format!("**{expected}**")), "{r}");
    // force-cost-id 2.5 is 0.167 above: within the 0.2 floor → tied, both bold; cone-program (6.0)
    // is 3.7 above → not tied.
    assert!(r.contains("**2.50 ± 1.24**"), "{r}");
    assert!(r.contains("tie: stiff-pd, force-cost-id"), "{r}");
    assert!(r.contains("6.00 ± 2.48") && !r.contains("**6.00"), "{r}");
    // μ 0.9: force-cost-id is 0.5 above stiff-pd (more than the floor) → stiff-pd alone; the
    // cone-program fall is left out of its mean (two seeds → no interval) and counted.
    let r = md_row(&md, "### Slope 5°", "0.9");
    assert!(r.contains("**1.00 ± 0.00**"), "{r}");
    assert!(r.contains("| 1.50 ± 0.00 |"), "{r}");
    assert!(r.contains("stiff-pd (by 0.500 mm)"), "{r}");
    assert!(!r.contains("tie"), "{r}");
    assert!(r.contains("3.10 (n=2) · 1 fell"), "{r}");
    // ...and a law that fell in the row is not ranked there, whatever its mean.
    assert!(
        r.contains("· not ranked (not every run ok): cone-program"),
        "{r}"
    );

    // Outcomes: the fall is counted, and its quoted message (with a comma) survives whole.
    let r = md_row(&md, "## Run outcomes", "cone-program");
    assert!(
        r.starts_with("| cone-program | 6 | 5 | 0 | 0 | 1 | 0 | 0 | 1 (17 %) |"),
        "{r}"
    );
    assert!(md.contains("1 × `fell` cone-program: trunk low, tilt 48 deg at t=3.5 s"));

    // Single rate and actuator: the plots are skipped and the summary says so.
    assert!(md.contains("single control rate (1000 Hz)"));
    assert!(md.contains("single actuator model (ideal)"));
    assert!(!run.path().join("plots/rate_study.png").exists());
    assert!(summary.skipped.iter().any(|s| s.contains("rate study")));
    assert!(md.contains("no `timing.csv`"));

    // The same numbers at full precision in summary.csv.
    let csv_text = run.read("summary.csv");
    let r = csv_row(
        &csv_text,
        &[
            ("table", "slip_by_friction"),
            ("mu", "0.4"),
            ("controller", "stiff-pd"),
        ],
    );
    let got_mean: f64 = csv_field(&csv_text, &r, "mean").parse().expect("mean");
    let got_half: f64 = csv_field(&csv_text, &r, "ci95_half").parse().expect("half");
    assert!((got_mean - mean).abs() < 1e-12);
    assert!(
        (got_half - half).abs() / half < 1e-3,
        "{got_half} vs {half}"
    );
    assert_eq!(csv_field(&csv_text, &r, "slope_deg"), "5");
    assert_eq!(csv_field(&csv_text, &r, "rate_hz"), "");
    assert_eq!(csv_field(&csv_text, &r, "n"), "3");
    assert_eq!(csv_field(&csv_text, &r, "mark"), "tied");
    let r = csv_row(
        &csv_text,
        &[
            ("table", "slip_by_friction"),
            ("mu", "0.9"),
            ("controller", "stiff-pd"),
        ],
    );
    assert_eq!(csv_field(&csv_text, &r, "mark"), "lowest");
    let r = csv_row(
        &csv_text,
        &[
            ("table", "slip_by_friction"),
            ("mu", "0.9"),
            ("controller", "cone-program"),
        ],
    );
    assert_eq!(csv_field(&csv_text, &r, "fell"), "1");
    assert_eq!(csv_field(&csv_text, &r, "ci95_half"), "");
    assert_eq!(csv_field(&csv_text, &r, "mark"), "unranked");
    // NaN left out of slip_max only: force-cost-id's slip_max mean covers 8 of its 9 values... per
    // seed: seed 0 has only its μ 0.9 cell (1.5 · 2.5 = 3.75).
    let r = csv_row(
        &csv_text,
        &[
            ("table", "per_controller"),
            ("controller", "force-cost-id"),
            ("metric", "slip_max_mm"),
        ],
    );
    assert_eq!(csv_field(&csv_text, &r, "n_cells"), "5");
    let got: f64 = csv_field(&csv_text, &r, "mean").parse().expect("mean");
    let want = (3.75 + (2.5 * 2.5 + 3.75) / 2.0 + (3.0 * 2.5 + 3.75) / 2.0) / 3.0;
    assert!((got - want).abs() < 1e-12, "{got} vs {want}");

    // SVGs carry the controller names and the axis labels with units.
    let svg = run.read("plots/slip_vs_friction.svg");
    for name in ["stiff-pd", "force-cost-id", "cone-program", "slope 5°"] {
        assert!(svg.contains(name), "slip plot lacks {name}");
    }
    assert!(svg.contains("static friction coefficient μ"));
    assert!(svg.contains("mean slip per stance phase (mm)"));
    assert!(svg.contains("slip floor"));
    let svg = run.read("plots/tracking_vs_friction.svg");
    assert!(svg.contains("base position error, RMS (mm)"));

    // "Where each law wins": generated from the same verdicts. Only one condition has a winner
    // (μ 0.9, where cone-program fell and is not ranked); μ 0.4 is a tie.
    assert!(
        md.contains("Of 2 conditions, 1 had a winner, 1 a tie"),
        "{md}"
    );
    assert!(md.contains("- **stiff-pd** had the lowest slip by more than the floor in 1 of its 2 conditions and tied for lowest in 1 more."));
    assert!(md.contains("- **cone-program** never had the lowest slip"));
    assert!(md.contains("**Where stiff PD does well.** `stiff-pd`"));
}

#[test]
fn report_floor_decides_tie_or_winner() {
    // The same data judged against a floor above the 0.5 mm gap at μ 0.9: now a tie.
    let (run, _) = small_run(0.6);
    write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    let md = run.read("summary.md");
    let r = md_row(&md, "### Slope 5°", "0.9");
    assert!(
        r.contains(
            "tie: stiff-pd, force-cost-id (within 0.600 mm or not shown by the paired test)"
        ),
        "{r}"
    );
    assert!(r.contains("**1.50 ± 0.00**"), "{r}");
    // With no floor at all, 0.167 mm at μ 0.4 is still a tie: the paired t-test across the
    // three seeds (differences −1, −0.5, +1: t = −0.17, t(0.975, 2) = 4.30) finds nothing.
    // At μ 0.9 the per-seed differences are all −0.5: a win.
    let (run, _) = small_run(0.0);
    write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    let md = run.read("summary.md");
    let r = md_row(&md, "### Slope 5°", "0.4");
    assert!(r.contains("tie: stiff-pd, force-cost-id"), "{r}");
    let r = md_row(&md, "### Slope 5°", "0.9");
    assert!(r.contains("stiff-pd (by 0.500 mm)"), "{r}");
}

/// A fuller run: two slopes, three μ, two rates, three actuators, timing and onset files.
#[test]
fn report_full_run_all_figures() {
    let run = RunDir::new("full");
    let ctrls = ["stiff-pd", "min-torque-id", "force-cost-id-load"];
    let actuators = ["ideal", "open-current", "torque-loop"];
    let mut cells = Vec::new();
    for slope in [0.0, 15.0] {
        for mu in [0.3, 0.6, 1.0] {
            for rate in [100.0, 1000.0] {
                for act in actuators {
                    for (ci, ctrl) in ctrls.iter().enumerate() {
                        for seed in 0..3u64 {
                            // Slip grows with slope/μ, falls with rate; stiff-pd suffers at
                            // 100 Hz, the load-normalised law is best at low μ.
                            let base = 0.3 + slope / 10.0 / mu;
                            let slip =
                                base * match (ci, rate as u32) {
                                    (0, 100) => 3.0,
                                    (0, _) => 0.8,
                                    (1, _) => 1.5,
                                    _ => 1.0,
                                } + 0.05 * seed as f64;
                            let fell = slope > 10.0 && mu < 0.5 && ci == 0 && rate < 500.0;
                            cells.push(C {
                                slope,
                                mu,
                                rate,
                                actuator: act,
                                controller: ctrl,
                                seed,
                                status: if fell { "fell" } else { "ok" },
                                message: if fell { "tilt beyond limit" } else { "" },
                                slip,
                                track: 3.0 + slip * 2.0,
                            });
                        }
                    }
                }
            }
        }
    }
    run.write("cells.csv", &cells_csv(&cells));
    run.write("manifest.json", &manifest(0.05));
    let mut timing = String::from("cell_id,compute_median_us,compute_p99_us,wall_s\n");
    for i in 0..cells.len() {
        timing.push_str(&format!(
            "{:016x},{},{},{}\n",
            0xab00_0000_0000u64 + i as u64,
            10.0 + (i % 7) as f64,
            30.0 + (i % 11) as f64,
            0.5
        ));
    }
    timing.push_str("ffffffffffffffff,1,2,3\n");
    run.write("timing.csv", &timing);
    let mut onset =
        String::from("mu,controller,rate_hz,actuator,onset_deg,friction_angle_deg,runs\n");
    for mu in [0.3f64, 0.6, 1.0] {
        for (ci, ctrl) in ctrls.iter().enumerate() {
            let limit = mu.atan().to_degrees();
            onset.push_str(&format!(
                "{mu},{ctrl},1000,ideal,{},{limit},8\n",
                limit * (0.7 + 0.1 * ci as f64)
            ));
        }
    }
    run.write("onset.csv", &onset);

    let summary = write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    assert!(summary.skipped.is_empty(), "{:?}", summary.skipped);
    check_outputs(
        &run,
        &summary,
        &[
            "slip_vs_friction",
            "tracking_vs_friction",
            "rate_study",
            "actuator_study",
            "onset_vs_friction",
        ],
    );
    let md = run.read("summary.md");
    assert!(md.contains("### Slope 0°") && md.contains("### Slope 15°"));
    assert!(md.contains("## What control rate buys"));
    // stiff-pd slips most at 100 Hz and least at 1000 Hz: pooling the rates hides that, so
    // the slip tables are also given per rate and actuator model.
    assert!(
        md.contains("Pooling control rates and actuator models changes the answer"),
        "{md}"
    );
    let r = md_row(&md, "#### Slope 15°, 1000 Hz, ideal", "0.3");
    assert!(r.contains("stiff-pd (by"), "{r}");
    let r = md_row(&md, "#### Slope 15°, 100 Hz, ideal", "1");
    assert!(!r.contains("stiff-pd (by"), "{r}");
    // Each law against itself across rates: stiff-pd fell at 100 Hz on 15°, μ 0.3 (all three
    // actuators), so those conditions leave its rate comparison at both rates.
    assert!(
        md.contains(
            "Conditions compared: stiff-pd 15 of 18, min-torque-id 18 of 18, force-cost-id-load 18 of 18."
        ),
        "{md}"
    );
    assert!(md.contains("| 100 Hz |") && md.contains("| open-current |"));
    assert!(md.contains("`timing.csv` has 1 row(s) for runs that are not in `cells.csv`"));
    assert!(md.contains("## Slip-onset study"));
    // At slope 15°, μ 0.3 stiff-pd fell in every 100 Hz run: its mean (1000 Hz runs only) is
    // the lowest, but it is not ranked; the verdict goes to the best law that never fell.
    let r = md_row(&md, "### Slope 15°", "0.3");
    assert!(r.contains("| 4.29 ± 0.12 · 9 fell |"), "{r}");
    assert!(
        r.contains("force-cost-id-load (by 2.65 mm) · not ranked (not every run ok): stiff-pd"),
        "{r}"
    );
    // The onset table: the steepest law per μ (force-cost-id-load at 0.9 of the limit).
    let r = md_row(&md, "### 1000 Hz, ideal", "0.6");
    assert!(r.ends_with("| force-cost-id-load |"), "{r}");
    // Where each law wins names conditions and the stiff-PD sentence is generated.
    assert!(md.contains("By control rate, the law with the lowest slip (or a tie) most often"));
    assert!(
        md.contains("By control rate, it does best at 1000 Hz"),
        "{md}"
    );
    let svg = run.read("plots/rate_study.svg");
    for t in [
        "stiff-pd",
        "min-torque-id",
        "force-cost-id-load",
        "100 Hz",
        "1000 Hz",
        "controller",
    ] {
        assert!(svg.contains(t), "rate plot lacks {t}");
    }
    let svg = run.read("plots/actuator_study.svg");
    for t in [
        "open-current",
        "torque-loop",
        "mean slip per stance phase (mm",
    ] {
        assert!(svg.contains(t), "actuator plot lacks {t}");
    }
    let svg = run.read("plots/onset_vs_friction.svg");
    for t in [
        "physical limit (atan μ)",
        "slip-onset slope angle (°)",
        "1000 Hz · ideal",
    ] {
        assert!(svg.contains(t), "onset plot lacks {t}");
    }
    // Rebuilding from the files alone gives the same summary.
    let again = write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(again.files, summary.files);
    assert_eq!(run.read("summary.md"), md);
}

/// Slip spanning more than two decades goes on a log axis, and says so; a single μ value is
/// drawn as points with no line through them.
#[test]
fn report_log_axis_and_single_friction() {
    let run = RunDir::new("log");
    let mut cells = Vec::new();
    for (ctrl, slip) in [("stiff-pd", 0.02), ("cone-program", 40.0)] {
        for seed in 0..2 {
            cells.push(C {
                slope: 10.0,
                mu: 0.5,
                rate: 500.0,
                actuator: "torque-loop",
                controller: ctrl,
                seed,
                status: "ok",
                message: "",
                slip,
                track: slip,
            });
        }
    }
    run.write("cells.csv", &cells_csv(&cells));
    run.write("manifest.json", &manifest(0.01));
    let summary = write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    check_outputs(
        &run,
        &summary,
        &["slip_vs_friction", "tracking_vs_friction"],
    );
    let svg = run.read("plots/slip_vs_friction.svg");
    assert!(svg.contains("mean slip per stance phase (mm, log scale)"));
    // Series lines are 2 px polylines in the series colour: with one μ the only one left is
    // the legend's key.
    let series0 = "stroke=\"#1D5C7E\" stroke-width=\"2\"";
    let lines = svg
        .lines()
        .filter(|l| l.contains("<polyline") && l.contains(series0))
        .count();
    assert_eq!(lines, 1, "a lone μ must be drawn as points, not lines");
    let md = run.read("summary.md");
    assert!(md.contains("0.0200 (n=2)"), "{md}");
}

#[test]
fn report_lines_join_several_friction_values() {
    // The counterpart of the single-μ check: with two μ values the series line is drawn.
    let (run, _) = small_run(0.2);
    write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    let svg = run.read("plots/slip_vs_friction.svg");
    let series0 = "stroke=\"#1D5C7E\" stroke-width=\"2\"";
    let lines = svg
        .lines()
        .filter(|l| l.contains("<polyline") && l.contains(series0))
        .count();
    assert_eq!(lines, 2, "legend key plus one series line");
}

#[test]
fn report_malformed_inputs_name_file_row_and_column() {
    let (run, _) = small_run(0.2);
    let good = run.read("cells.csv");

    // A missing column: named, with the header line.
    let no_col = good
        .lines()
        .map(|l| {
            let mut f: Vec<&str> = l.split(',').collect();
            f.remove(16); // slip_total_mm
            f.join(",")
        })
        .collect::<Vec<_>>()
        .join("\n");
    run.write("cells.csv", &no_col);
    let e = write_report(run.path()).expect_err("missing column must fail");
    assert!(e.contains("cells.csv"), "{e}");
    assert!(e.contains("line 1 (header)"), "{e}");
    assert!(e.contains("missing column 'slip_total_mm'"), "{e}");

    // A non-numeric value: file, data row, file line and column.
    let mut lines: Vec<String> = good.lines().map(str::to_string).collect();
    let mut f: Vec<String> = lines[2].split(',').map(str::to_string).collect();
    f[14] = "1.2mm".to_string(); // slip_mean_mm of data row 2
    lines[2] = f.join(",");
    run.write("cells.csv", &lines.join("\n"));
    let e = write_report(run.path()).expect_err("bad number must fail");
    assert!(e.contains("cells.csv"), "{e}");
    assert!(e.contains("row 2 (line 3)"), "{e}");
    assert!(e.contains("column 'slip_mean_mm'"), "{e}");
    assert!(e.contains("'1.2mm'"), "{e}");

    // A short row (a field lost): the first missing column is named.
    let mut lines: Vec<String> = good.lines().map(str::to_string).collect();
    let cut = lines[5].rfind(',').expect("comma");
    lines[5].truncate(cut);
    run.write("cells.csv", &lines.join("\n"));
    let e = write_report(run.path()).expect_err("short row must fail");
    assert!(e.contains("row 5 (line 6)"), "{e}");
    assert!(e.contains("'law_trouble_share' is missing"), "{e}");

    // An unknown status and a bad axis value.
    let mut lines: Vec<String> = good.lines().map(str::to_string).collect();
    lines[1] = lines[1].replace(",ok,", ",walked,");
    run.write("cells.csv", &lines.join("\n"));
    let e = write_report(run.path()).expect_err("bad status must fail");
    assert!(e.contains("row 1 (line 2), column 'status'"), "{e}");
    let mut lines: Vec<String> = good.lines().map(str::to_string).collect();
    let mut f: Vec<String> = lines[3].split(',').map(str::to_string).collect();
    f[3] = "NaN".to_string(); // mu
    lines[3] = f.join(",");
    run.write("cells.csv", &lines.join("\n"));
    let e = write_report(run.path()).expect_err("NaN axis must fail");
    assert!(e.contains("row 3 (line 4), column 'mu'"), "{e}");

    // The manifest without its slip floor.
    run.write("cells.csv", &good);
    run.write(
        "manifest.json",
        "{\"scenario_name\": \"x\", \"tool_version\": \"0.1.0\"}",
    );
    let e = write_report(run.path()).expect_err("manifest without floor must fail");
    assert!(
        e.contains("manifest.json") && e.contains("slip_floor_mm"),
        "{e}"
    );

    // A malformed optional file is an error too, named as such.
    run.write("manifest.json", &manifest(0.2));
    run.write(
        "timing.csv",
        "cell_id,compute_median_us,compute_p99_us,wall_s\nab,1,x,3\n",
    );
    let e = write_report(run.path()).expect_err("bad timing must fail");
    assert!(
        e.contains("timing.csv: row 1 (line 2), column 'compute_p99_us'"),
        "{e}"
    );

    // Nothing was written by the failed attempts.
    assert!(!run.path().join("summary.md").exists());
}

/// Five slopes and five controllers: a 2 × 3 facet grid of known size, and every status.
#[test]
fn report_grid_layout_and_every_status() {
    let run = RunDir::new("grid");
    let ctrls = [
        "stiff-pd",
        "min-torque-id",
        "force-cost-id",
        "force-cost-id-load",
        "cone-program",
    ];
    let mut cells = Vec::new();
    for slope in [0.0, 5.0, 10.0, 15.0, 20.0] {
        for mu in [0.5, 1.0] {
            for (ci, ctrl) in ctrls.iter().enumerate() {
                let (status, message, slip) = match (slope as u32, mu == 0.5, *ctrl) {
                    (20, true, "cone-program") => (
                        "infeasible",
                        "cone program infeasible; closest command",
                        2.5,
                    ),
                    (20, true, "min-torque-id") => ("diverged", "non-finite state", f64::NAN),
                    (15, true, "stiff-pd") => (
                        "no-control",
                        "did not control the robot: at a torque limit 99 % of the time",
                        0.5,
                    ),
                    (20, false, "force-cost-id") => ("error", "solver said \"no\", twice", 1.0),
                    _ => ("ok", "", 1.0 + slope / 10.0 + 0.3 * ci as f64),
                };
                cells.push(C {
                    slope,
                    mu,
                    rate: 250.0,
                    actuator: "ideal",
                    controller: ctrl,
                    seed: 0,
                    status,
                    message,
                    slip,
                    track: 2.0 * slip,
                });
            }
        }
    }
    run.write("cells.csv", &cells_csv(&cells));
    run.write("manifest.json", &manifest(0.05));
    let summary = write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    check_outputs(
        &run,
        &summary,
        &["slip_vs_friction", "tracking_vs_friction"],
    );
    // Three columns of 380 px plus margins; header (title, one subtitle line, one legend
    // row) 98 px, two rows of 300 px panels, 12 px bottom margin.
    assert_eq!(
        png_size(&run.path().join("plots/slip_vs_friction.png")),
        (2 * 24 + 3 * 380, 98 + 2 * 300 + 12)
    );
    let md = run.read("summary.md");
    // Only ok runs count in the means and rankings; an infeasible or no-control run is
    // counted beside its condition, never averaged in or named; error runs only in the
    // outcomes. One seed: no paired test is possible, so the ok laws tie.
    let r = md_row(&md, "### Slope 20°", "0.5");
    assert!(r.contains("| — · 1 infeasible |"), "{r}");
    assert!(r.contains("| — · 1 fell |"), "{r}");
    assert!(
        r.contains("tie: stiff-pd, force-cost-id, force-cost-id-load"),
        "{r}"
    );
    assert!(!r.contains("cone-program ("), "{r}");
    let r = md_row(&md, "### Slope 15°", "0.5");
    assert!(r.starts_with("| 0.5 | — · 1 no-control |"), "{r}");
    assert!(!r.contains("stiff-pd ("), "{r}");
    let r = md_row(&md, "## Run outcomes", "min-torque-id");
    assert!(
        r.starts_with("| min-torque-id | 10 | 9 | 0 | 0 | 0 | 1 | 0 | 1 (10 %) |"),
        "{r}"
    );
    let r = md_row(&md, "## Run outcomes", "stiff-pd");
    assert!(
        r.starts_with("| stiff-pd | 10 | 9 | 0 | 1 | 0 | 0 | 0 | 0 (0 %) |"),
        "{r}"
    );
    let r = md_row(&md, "## Run outcomes", "force-cost-id");
    assert!(
        r.starts_with("| force-cost-id | 10 | 9 | 0 | 0 | 0 | 0 | 1 | 0 (0 %) |"),
        "{r}"
    );
    assert!(
        md.contains("1 × `error` force-cost-id: solver said \"no\", twice"),
        "{md}"
    );
    let r = md_row(&md, "## Run outcomes", "cone-program");
    assert!(
        r.starts_with("| cone-program | 10 | 9 | 1 | 0 | 0 | 0 | 0 | 0 (0 %) |"),
        "{r}"
    );
    let r = md_row(&md, "### Slope 20°", "1");
    assert!(r.contains("| — · 1 error |"), "{r}");
}

/// A μ where no run of a law held breaks that law's line instead of drawing through it.
#[test]
fn report_line_breaks_where_no_run_held() {
    let run = RunDir::new("gap");
    let mut cells = Vec::new();
    for mu in [0.3, 0.6, 1.0] {
        for ctrl in ["stiff-pd", "force-cost-id"] {
            let fell = ctrl == "stiff-pd" && mu == 0.6;
            cells.push(C {
                slope: 10.0,
                mu,
                rate: 1000.0,
                actuator: "ideal",
                controller: ctrl,
                seed: 0,
                status: if fell { "fell" } else { "ok" },
                message: "",
                slip: 1.0 / mu,
                track: 5.0,
            });
        }
    }
    run.write("cells.csv", &cells_csv(&cells));
    run.write("manifest.json", &manifest(0.05));
    write_report(run.path()).unwrap_or_else(|e| panic!("{e}"));
    let svg = run.read("plots/slip_vs_friction.svg");
    // Open 2 px polylines in a series colour: the legend key and the series lines (marker
    // outlines are closed, so they do not count).
    let count = |color: &str| {
        let key = format!("stroke=\"{color}\" stroke-width=\"2\"");
        svg.lines()
            .filter(|l| l.contains("<polyline") && l.contains(&key))
            .filter(|l| {
                let pts: Vec<&str> = l
                    .split("points=\"")
                    .nth(1)
                    .and_then(|r| r.split('"').next())
                    .unwrap_or("")
                    .split_whitespace()
                    .collect();
                pts.first() != pts.last()
            })
            .count()
    };
    // stiff-pd (first colour): legend key only, its two points are not joined across μ 0.6.
    assert_eq!(count("#1D5C7E"), 1);
    // force-cost-id (second colour): legend key and one line through all three μ.
    assert_eq!(count("#C4573A"), 2);
}

/// The plan's limit from the manifest: which conditions are beyond it, the outcome class of
/// each run, the outcome map drawn with every class's colour, and the limit table.
#[test]
fn report_outcome_map_and_plan_limit() {
    use gripsweep::report::{OUTCOME_CLASSES, outcome_class, read_manifest};
    let run = RunDir::new("limit");
    let mut cells = Vec::new();
    // (slope, μ, controller, status): 10° needs μ ≥ 0.25 here; 20° cannot be planned at all.
    let rows = [
        (10.0, 0.2, "stiff-pd", "ok"),
        (10.0, 0.2, "force-cost-id", "fell"),
        (10.0, 0.6, "stiff-pd", "infeasible"),
        (10.0, 0.6, "force-cost-id", "ok"),
        (20.0, 0.6, "stiff-pd", "ok"),
        (20.0, 0.6, "force-cost-id", "error"),
        (10.0, 0.2, "stiff-pd", "ok"),
        (10.0, 0.6, "force-cost-id", "ok"),
    ];
    for (i, (slope, mu, controller, status)) in rows.into_iter().enumerate() {
        cells.push(C {
            slope,
            mu,
            rate: 1000.0,
            actuator: "ideal",
            controller,
            seed: (i / 6) as u64,
            status,
            message: "",
            slip: 1.0 + i as f64,
            track: 5.0,
        });
    }
    run.write("cells.csv", &cells_csv(&cells));
    run.write(
        "manifest.json",
        "{\"scenario_name\": \"limits\", \"slip_floor_mm\": 0.1, \"tool_version\": \"0.1.0\", \"plan_limits\": [\
         {\"slope_deg\": 10.0, \"mu_required\": 0.25, \"at_s\": 1.5, \"torque_share\": 0.5, \"mu_required_torque_limited\": 0.25},\
         {\"slope_deg\": 20.0, \"mu_required\": null, \"at_s\": 0.3, \"torque_share\": null, \"mu_required_torque_limited\": null}]}",
    );
    let m = read_manifest(&run.path().join("manifest.json")).expect("manifest");
    assert!(m.beyond_plan_limit(10.0, 0.2));
    assert!(!m.beyond_plan_limit(10.0, 0.25) && !m.beyond_plan_limit(10.0, 0.6));
    assert!(m.beyond_plan_limit(20.0, 0.6) && m.beyond_plan_limit(20.0, 100.0));
    // A slope the manifest does not know is never called beyond.
    assert!(!m.beyond_plan_limit(30.0, 0.1));
    // Classes: falls first, then the limit, then what the run did; unknown statuses do not
    // count as held.
    let class = |s, b| OUTCOME_CLASSES[outcome_class(s, b)];
    assert_eq!(class("ok", false), "held and controlled");
    assert_eq!(class("ok", true), "beyond the plan's limit");
    assert_eq!(class("fell", true), "fell or diverged");
    assert_eq!(class("diverged", false), "fell or diverged");
    assert_eq!(class("infeasible", false), "did not control");
    assert_eq!(class("some-new-status", false), "did not control");
    assert_eq!(class("error", false), "not set up");

    let summary = write_report(run.path()).expect("report");
    check_outputs(&run, &summary, &["outcome_map"]);
    let svg = run.read("plots/outcome_map.svg").to_uppercase();
    // Every class present in the data is drawn in its colour: held (moss), did not control
    // (ochre), beyond the limit (plum), fell (terracotta), not set up (stone); the legend
    // adds one swatch per class, so each colour appears at least twice.
    for colour in ["#5A8A3C", "#D9A02B", "#9A7698", "#C4573A", "#A8A296"] {
        let n = svg.matches(&format!("FILL=\"{colour}\"")).count();
        assert!(n >= 2, "{colour} drawn {n} times");
    }
    let md = run.read("summary.md");
    let row = md_row(&md, "## The plan's own limit", "10°");
    assert!(row.contains("0.250") && row.contains("| 0.2 |"), "{row}");
    let row = md_row(&md, "## The plan's own limit", "20°");
    assert!(row.contains("∞") && row.contains("0.2, 0.6"), "{row}");
    // No table ranks a condition beyond the plan's limit: stiff PD's two `ok` runs at 10°,
    // μ 0.2 are counted as beyond, never bold (a winner) and never averaged.
    let r = md_row(&md, "### Slope 10°", "0.2");
    assert!(r.contains("beyond the plan's limit"), "{r}");
    assert!(!r.contains("**"), "nothing ranked beyond the limit: {r}");
    assert!(
        !r.contains("1.00") && !r.contains("7.00"),
        "no mean of its slips: {r}"
    );
}
