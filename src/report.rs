//! Text and JSON output. Knows nothing of terminals: every function returns a
//! `String` or a `serde_json::Value`, and the binary decides where it goes.

use serde_json::{Value, json};

use crate::bounds::{BoundRow, Interval, Query, RequiredSize, SizeQuery, Unavailable};

mod follow;
mod status;

pub use follow::{FollowOutput, Lines, notice, summary};
pub use status::{neutralise, status_csv, status_json, status_text, verdict, when};

/// The cautions in one line, for compact outputs.
pub const CAUTIONS_SHORT: &str = "Sampling error only (not non-response, coverage or measurement error); \
quota samples are not probability samples; the study's statistician decides.";

/// Untrusted text made safe to print: control characters (escape sequences among
/// them) and characters that hide or reorder text shown as `\u{…}`, and values longer
/// than `max` characters cut with an ellipsis.
pub fn clean(text: &str, max: usize) -> String {
    crate::rows::shown_safely(text, max.saturating_sub(1))
}

/// The usual cautions, shown wherever a margin could be taken for more than it is.
pub const CAUTIONS: &str = "Margins cover sampling error only, not non-response, coverage or \
measurement error. Quota samples are not probability samples, so every guarantee assumes \
responses behave like random draws within their cell. The study's statistician and the \
standards that bind the study decide.";

/// A number of percent with two decimals, or three significant digits below 0.1 so
/// that small values do not show as zero.
fn percent_digits(v: f64) -> String {
    if v == 0.0 || v.abs() >= 0.1 || !v.is_finite() {
        return format!("{v:.2}");
    }
    let decimals = (2 - v.abs().log10().floor() as i32).clamp(2, 20) as usize;
    format!("{v:.decimals$}")
}

/// A proportion as a percentage: `30.80 %`, `0.00120 %`.
pub fn percent(x: f64) -> String {
    format!("{} %", percent_digits(100.0 * x))
}

/// A margin in percentage points: `±5.58 pts`.
pub fn points(x: f64) -> String {
    format!("±{} pts", percent_digits(100.0 * x))
}

/// A confidence level as people write it: 95 %, 99.9 %, 1 − 1e-12.
pub fn confidence_label(c: f64, delta: f64) -> String {
    if delta < 1e-4 {
        format!("1 − {delta:e}")
    } else {
        let text = format!("{:.4}", 100.0 * c);
        let text = text.trim_end_matches('0').trim_end_matches('.');
        format!("{text} %")
    }
}

/// Words of `text` joined into lines of at most `width` characters (a longer word
/// stands alone on its line).
pub fn wrap(text: &str, width: usize) -> String {
    let mut out = String::new();
    let mut line = 0;
    for word in text.split_whitespace() {
        if line > 0 && line + 1 + word.chars().count() > width {
            out.push('\n');
            line = 0;
        } else if line > 0 {
            out.push(' ');
            line += 1;
        }
        out.push_str(word);
        line += word.chars().count();
    }
    out
}

/// The readable table for `closeout margin`.
pub fn margin_text(q: &Query, rows: &[Result<Interval, Unavailable>]) -> String {
    let level = q.level();
    let mut out = String::new();
    let estimate = q.estimate().map_or_else(|| "none yet".to_string(), percent);
    out.push_str(&format!(
        "{} successes in {} responses: estimate {}, confidence {}\n",
        q.successes(),
        q.n(),
        estimate,
        confidence_label(level.confidence(), level.delta())
    ));
    if let Some(total) = q.population() {
        out.push_str(&format!(
            "population {total} (sampling without replacement)\n"
        ));
    }
    let default_note = if q.tune_for_given() {
        ""
    } else {
        " (the responses themselves: give --tune-for the size planned in advance)"
    };
    out.push_str(&format!(
        "anytime sequence tuned for {} responses{default_note}\n\n",
        q.tune_for()
    ));
    out.push_str(&format!(
        "{:<16} {:>9} {:>9} {:>12}  {:<12} {}\n",
        "method", "lower", "upper", "margin", "guarantee", "note"
    ));
    for row in rows {
        match row {
            Ok(i) => out.push_str(&format!(
                "{:<16} {:>9} {:>9} {:>12}  {:<12} {}\n",
                i.method.name(),
                percent(i.lower),
                percent(i.upper),
                points(i.margin),
                i.guarantee.name(),
                i.note.unwrap_or("")
            )),
            Err(u) => out.push_str(&format!(
                "{:<16} {:>9} {:>9} {:>12}  {:<12} {}\n",
                u.method.name(),
                "—",
                "—",
                "—",
                u.method.guarantee().name(),
                u.reason
            )),
        }
    }
    out.push('\n');
    out.push_str(&wrap(CAUTIONS, 88));
    out.push('\n');
    out
}

fn interval_json(row: &Result<Interval, Unavailable>) -> Value {
    serde_json::to_value(BoundRow::from(row)).unwrap_or(Value::Null)
}

/// The JSON document for `closeout margin --json`.
pub fn margin_json(q: &Query, rows: &[Result<Interval, Unavailable>]) -> Value {
    json!({
        "successes": q.successes(),
        "n": q.n(),
        "confidence": q.level().confidence(),
        "estimate": q.estimate(),
        "population": q.population(),
        "tune_for": q.tune_for(),
        "bounds": rows.iter().map(interval_json).collect::<Vec<_>>(),
    })
}

/// The readable table for `closeout size`.
pub fn size_text(sq: &SizeQuery, rows: &[Result<RequiredSize, Unavailable>]) -> String {
    let level = sq.level();
    let mut out = format!(
        "responses needed for a margin of {} at confidence {}",
        points(sq.margin()),
        confidence_label(level.confidence(), level.delta())
    );
    match sq.expect() {
        Some(p) => out.push_str(&format!(", expecting a proportion near {}", percent(p))),
        None => out.push_str(", whatever the proportion turns out to be"),
    }
    if let Some(total) = sq.population() {
        out.push_str(&format!(", from a population of {total}"));
    }
    out.push_str("\n\n");
    out.push_str(&format!(
        "{:<16} {:>12}  {:<12} {}\n",
        "method", "responses", "guarantee", "note"
    ));
    for row in rows {
        match row {
            Ok(r) => {
                let mut note = r.note.unwrap_or("").to_string();
                if let Some(all) = r.n_all_larger
                    && all != r.n
                {
                    let extra = format!("every n from {all} on meets it (some between do not)");
                    note = if note.is_empty() {
                        extra
                    } else {
                        format!("{note}; {extra}")
                    };
                }
                out.push_str(&format!(
                    "{:<16} {:>12}  {:<12} {}\n",
                    r.method.name(),
                    r.n,
                    r.guarantee.name(),
                    note
                ));
            }
            Err(u) => out.push_str(&format!(
                "{:<16} {:>12}  {:<12} {}\n",
                u.method.name(),
                "—",
                u.method.guarantee().name(),
                u.reason
            )),
        }
    }
    out.push('\n');
    out.push_str(&wrap(CAUTIONS, 88));
    out.push('\n');
    out
}

/// The JSON document for `closeout size --json`.
pub fn size_json(sq: &SizeQuery, rows: &[Result<RequiredSize, Unavailable>]) -> Value {
    let sizes: Vec<Value> = rows
        .iter()
        .map(|row| match row {
            Ok(r) => {
                let mut v = json!({ "method": r.method, "n": r.n, "guarantee": r.guarantee });
                if let Some(all) = r.n_all_larger {
                    v["n_all_larger"] = json!(all);
                }
                if let Some(note) = r.note {
                    v["note"] = json!(note);
                }
                v
            }
            Err(u) => json!({
                "method": u.method,
                "n": null,
                "guarantee": u.method.guarantee(),
                "unavailable": u.reason,
            }),
        })
        .collect();
    json!({
        "margin": sq.margin(),
        "confidence": sq.level().confidence(),
        "population": sq.population(),
        "expect": sq.expect(),
        "sizes": sizes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_values_keep_three_significant_digits() {
        assert_eq!(percent(0.308), "30.80 %");
        assert_eq!(percent(0.0), "0.00 %");
        assert_eq!(percent(0.000_012_34), "0.00123 %");
        assert_eq!(points(0.0558), "±5.58 pts");
        assert_eq!(points(0.000_5), "±0.0500 pts");
    }

    #[test]
    fn confidence_labels() {
        assert_eq!(confidence_label(0.95, 0.05), "95 %");
        assert_eq!(confidence_label(0.999, 0.001), "99.9 %");
        assert_eq!(confidence_label(1.0 - 1e-12, 1e-12), "1 − 1e-12");
    }
}
