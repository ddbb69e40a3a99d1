//! The axis table is the one place an axis is declared: these tests fail when a declared axis
//! does not reach the cell key (and so the id and seed), the `cells.csv` columns, the report's
//! tables and `summary.csv`, or the replay command. In unit tests the table holds a throw-away
//! axis, `test_knob`, that no other code names (`run_format::AXES`): it must arrive everywhere
//! through the table alone.

use crate::matrix::{Cell, expand};
use crate::run_format::{AXES, AxisKind, AxisValue, cells_header};
use crate::runner::{RunOptions, run};
use crate::scenario::Scenario;

/// A cheap matrix: standing for 0.5 s, stiff PD at the plant rate, the throw-away axis at two
/// values (its neutral 0 and 2.5).
fn knob_scenario() -> Scenario {
    let text = "name = \"knob\"\nduration = 0.5\n[gait]\nkind = \"stand\"\n[axes]\nmu = [0.9]\ncontroller = [\"stiff-pd\"]\ntest_knob = [0.0, 2.5]\n";
    Scenario::from_text("knob.toml", text, None).expect("scenario with the throw-away axis")
}

/// A value of `axis` other than the one `cell` has, of the axis's kind.
fn another(axis: &crate::run_format::Axis, v: &AxisValue) -> AxisValue {
    match (axis.kind, v) {
        (AxisKind::Number, AxisValue::Number(x)) => AxisValue::Number(x + 0.25),
        _ => AxisValue::Name(format!("{}-other", v.text())),
    }
}

#[test]
fn every_declared_axis_is_in_the_key_and_the_csv_columns() {
    let s = knob_scenario();
    let cell = Cell::first_of(&s.axes);
    let header = cells_header();
    for a in AXES {
        // The key: a cell that differs on this axis alone has another id and seed.
        let other = cell.clone().set(a.name, another(a, cell.value(a.name)));
        assert!(
            other.key().contains(&format!("{}=", a.name)),
            "axis `{}` is missing from the cell key {}",
            a.name,
            other.key()
        );
        assert_ne!(cell.id(), other.id(), "axis `{}`: same id", a.name);
        assert_ne!(
            cell.rng_seed(),
            other.rng_seed(),
            "axis `{}`: same seed",
            a.name
        );
        // The CSV: a column of that name, and the cell's value under it.
        let col = header.iter().position(|h| h == a.name);
        assert!(col.is_some(), "axis `{}` is missing from cells.csv", a.name);
        let identity = other.identity(other.id());
        assert!(
            identity
                .iter()
                .any(|(n, v)| *n == a.name && *v == other.value(a.name).text()),
            "axis `{}` is missing from the cell's row",
            a.name
        );
    }
    // The throw-away axis at its neutral value leaves the key of the first release alone.
    assert!(!cell.key().contains("test_knob"), "{}", cell.key());
}

#[test]
fn a_throw_away_axis_reaches_the_key_the_csv_and_the_report() {
    let s = knob_scenario();
    let cells = expand(&s);
    assert_eq!(cells.len(), 2);
    assert!(
        cells[1].key().contains("test_knob=2.5"),
        "{}",
        cells[1].key()
    );
    assert_ne!(cells[0].id(), cells[1].id());

    let dir = std::env::temp_dir().join(format!("gripsweep-axis-table-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let opts = RunOptions {
        out: dir.clone(),
        threads: Some(1),
        quiet: true,
        ..RunOptions::default()
    };
    run(&s, &opts).expect("run with the throw-away axis");

    // cells.csv: the column and both values, read back by name.
    let text = std::fs::read_to_string(dir.join(crate::run_format::CELLS_FILE)).unwrap();
    let mut rdr = csv::Reader::from_reader(text.as_bytes());
    let head: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let col = head
        .iter()
        .position(|h| h == "test_knob")
        .expect("cells.csv column");
    let values: Vec<String> = rdr
        .records()
        .map(|r| r.unwrap().get(col).unwrap().to_string())
        .collect();
    assert_eq!(values, ["0", "2.5"]);

    // The report: the run's cells carry it, its tables group by it (summary.csv has it as a
    // condition column with both values), and the replay command picks it.
    let run = crate::report::read_run(&dir).expect("report input");
    let k = crate::run_format::axis("test_knob");
    assert_eq!(run.cells[1].axis_values[k], AxisValue::Number(2.5));
    let summary = std::fs::read_to_string(dir.join("summary.csv")).unwrap();
    let mut rdr = csv::Reader::from_reader(summary.as_bytes());
    let head: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let col = head
        .iter()
        .position(|h| h == "test_knob")
        .expect("summary.csv column");
    let mut seen: Vec<String> = rdr
        .records()
        .map(|r| r.unwrap().get(col).unwrap().to_string())
        .filter(|v| !v.is_empty())
        .collect();
    seen.sort();
    seen.dedup();
    assert_eq!(seen, ["0", "2.5"]);
    let keep = vec![true; crate::run_format::axis_columns().len()];
    let cmd = crate::report::trace_command(None, &run.cells[1], &keep);
    assert!(cmd.contains("--pick test_knob=2.5"), "{cmd}");
    let _ = std::fs::remove_dir_all(&dir);
}
