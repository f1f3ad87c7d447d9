//! The binary: output shapes, messages and exit codes (0 success, 2 bad arguments).

#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use assert_cmd::Command;
use predicates::prelude::*;
use serde_json::Value;

fn closeout() -> Command {
    Command::cargo_bin("closeout").unwrap()
}

fn json_of(args: &[&str]) -> Value {
    let out = closeout()
        .args(args)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    serde_json::from_slice(&out).unwrap()
}

#[test]
fn margin_json_has_every_method_with_the_documented_fields() {
    let v = json_of(&["margin", "81", "263", "--json"]);
    assert_eq!(v["successes"], 81);
    assert_eq!(v["n"], 263);
    assert_eq!(v["confidence"], 0.95);
    assert!(v["population"].is_null());
    let bounds = v["bounds"].as_array().unwrap();
    let names: Vec<&str> = bounds
        .iter()
        .map(|b| b["method"].as_str().unwrap())
        .collect();
    assert_eq!(
        names,
        [
            "wald",
            "wilson",
            "clopper-pearson",
            "chebyshev",
            "hoeffding",
            "chernoff",
            "bernstein",
            "binomial",
            "anytime"
        ]
    );
    for b in bounds {
        let (lo, hi, m) = (
            b["lower"].as_f64().unwrap(),
            b["upper"].as_f64().unwrap(),
            b["margin"].as_f64().unwrap(),
        );
        assert!(lo <= hi && m > 0.0, "{b}");
    }
    let guarantee =
        |name: &str| bounds.iter().find(|b| b["method"] == name).unwrap()["guarantee"].clone();
    assert_eq!(guarantee("wilson"), "approximate");
    assert_eq!(guarantee("clopper-pearson"), "fixed-n");
    assert_eq!(guarantee("hoeffding"), "worst-case");
    assert_eq!(guarantee("anytime"), "anytime");
}

#[test]
fn margin_with_population_reports_it_and_narrows() {
    let with = json_of(&["margin", "81", "263", "--population", "400", "--json"]);
    let without = json_of(&["margin", "81", "263", "--json"]);
    assert_eq!(with["population"], 400);
    let wald = |v: &Value| v["bounds"][0]["margin"].as_f64().unwrap();
    // √((400 − 263)/(400 − 1)) = 0.58597… times the plain Wald margin.
    let factor = ((400.0 - 263.0) / 399.0f64).sqrt();
    assert!((wald(&with) - factor * wald(&without)).abs() < 1e-12);
    let bernstein = &with["bounds"][6];
    assert!(
        bernstein["margin"].is_null()
            && bernstein["unavailable"]
                .as_str()
                .unwrap()
                .contains("finite-population")
    );
}

#[test]
fn margin_table_names_the_tuning_and_the_cautions() {
    closeout()
        .args(["margin", "15", "148"])
        .assert()
        .success()
        .stdout(predicate::str::contains(
            "anytime sequence tuned for 148 responses",
        ))
        .stdout(predicate::str::contains("sampling error only"))
        .stdout(predicate::str::contains("clopper-pearson"));
}

#[test]
fn size_json_matches_the_documented_shape() {
    let v = json_of(&["size", "--margin", "0.03", "--json"]);
    assert_eq!(v["margin"], 0.03);
    let sizes = v["sizes"].as_array().unwrap();
    let row = |name: &str| sizes.iter().find(|s| s["method"] == name).unwrap().clone();
    assert_eq!(row("hoeffding")["n"], 2050);
    assert_eq!(row("chebyshev")["n"], 5556);
    assert_eq!(row("wald")["n"], 1068);
    assert!(row("binomial")["n_all_larger"].is_u64());
    assert!(row("wald").get("n_all_larger").is_none());
}

#[test]
fn bad_arguments_exit_2_with_one_line_naming_the_value() {
    let cases: [(&[&str], &str); 6] = [
        (&["margin", "5", "4"], "successes '5' exceed responses '4'"),
        (
            &["margin", "5", "10", "--confidence", "1.5"],
            "confidence '1.5'",
        ),
        (
            &["margin", "5", "10", "--population", "9"],
            "population '9'",
        ),
        (&["size", "--margin", "0"], "margin '0'"),
        (
            &["size", "--margin", "0.05", "--expect", "2"],
            "expected proportion '2'",
        ),
        (&["margin", "0", "0"], "responses must be at least 1"),
    ];
    for (args, needle) in cases {
        let out = closeout().args(args).assert().code(2).get_output().clone();
        let err = String::from_utf8(out.stderr).unwrap();
        assert!(err.contains(needle), "{args:?}: {err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{args:?}: {err}");
        assert!(out.stdout.is_empty());
    }
}

#[test]
fn unknown_flags_are_usage_errors() {
    closeout()
        .args(["margin", "1", "2", "--confidance", "0.9"])
        .assert()
        .code(2);
    closeout().args(["size"]).assert().code(2);
}
