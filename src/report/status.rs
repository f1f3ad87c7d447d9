//! `closeout status`: the Snapshot as a compact text table, as JSON, and as CSV.

use jiff::Timestamp;

use super::{CAUTIONS_SHORT, clean, confidence_label, points};
use crate::assess::{CellView, Snapshot, Status};

/// A moment in UTC, to the minute.
pub fn when(t: Timestamp) -> String {
    t.strftime("%Y-%m-%d %H:%M UTC").to_string()
}

fn worst_measure(cell: &CellView) -> String {
    let worst = cell
        .measures
        .iter()
        .filter(|m| !m.met)
        .max_by(|a, b| {
            a.margin
                .unwrap_or(f64::INFINITY)
                .total_cmp(&b.margin.unwrap_or(f64::INFINITY))
        })
        .or_else(|| {
            cell.measures
                .iter()
                .max_by(|a, b| a.margin.unwrap_or(0.0).total_cmp(&b.margin.unwrap_or(0.0)))
        });
    match worst {
        Some(m) => match m.margin {
            Some(margin) => format!("{} {}", clean(&m.name, 24), points(margin)),
            None => format!("{} (no margin yet)", clean(&m.name, 24)),
        },
        None => String::new(),
    }
}

/// The verdict line.
pub fn verdict(s: &Snapshot) -> String {
    if s.ready_to_close {
        format!("READY TO CLOSE: all {} planned cells met", s.cells_planned)
    } else {
        let eta = match s.last_eta {
            Some(t) => format!("last cell expected {}", when(t)),
            None => "no ETA yet for every open cell".to_string(),
        };
        format!(
            "still collecting: {} of {} planned cells met, {} open; {eta}",
            s.cells_met,
            s.cells_planned,
            s.cells_planned - s.cells_met
        )
    }
}

/// The compact table a person reads in a terminal or an e-mail.
pub fn status_text(s: &Snapshot) -> String {
    let mut out = String::new();
    out.push_str(&clean(&s.title, 120));
    out.push('\n');
    let newest = s.newest_response.map_or_else(
        || "no arrival times".to_string(),
        |t| format!("newest {}", when(t)),
    );
    out.push_str(&format!(
        "{}: {} rows read, {} rejected, {} duplicates; {} responses counted, {newest}\n",
        clean(&s.source_file, 120),
        s.rows_read,
        s.rows_rejected,
        s.duplicates,
        s.responses
    ));
    let level = if s.simultaneous {
        format!(
            "{} for all cells at once ({} each)",
            confidence_label(s.confidence, 1.0 - s.confidence),
            confidence_label(s.decision_confidence, 1.0 - s.decision_confidence)
        )
    } else {
        confidence_label(s.confidence, 1.0 - s.confidence)
    };
    out.push_str(&format!(
        "target {} at {level}, decided by {} ({}: {})\n",
        points(s.margin_target),
        s.decide_by,
        s.guarantee,
        s.guarantee.meaning()
    ));
    let deadline = s
        .deadline
        .map_or_else(String::new, |d| format!("; deadline {}", when(d)));
    out.push_str(&format!("as of {}{deadline}\n", when(s.as_of)));
    out.push_str(&verdict(s));
    out.push_str("\n\n");
    out.push_str(&format!(
        "{:<8} {:<28} {:>9} {:>7} {:>7} {:<21} {}\n",
        "status", "cell", "responses", "needed", "rate/h", "ETA", "widest margin"
    ));
    for cell in s.cells.iter().filter(|c| c.planned) {
        let needed = match cell.needed {
            Some(k) => k.to_string(),
            None => "—".to_string(),
        };
        let rate = cell
            .rate_per_hour
            .map_or_else(|| "—".to_string(), |r| format!("{r:.1}"));
        let eta = match (cell.status, cell.eta) {
            (Status::Met, _) => String::new(),
            (_, Some(t)) => when(t),
            (_, None) => "—".to_string(),
        };
        out.push_str(&format!(
            "{:<8} {:<28} {:>9} {:>7} {:>7} {:<21} {}\n",
            cell.status.word(),
            clean(&cell.label, 28),
            cell.responses,
            needed,
            rate,
            eta,
            worst_measure(cell)
        ));
    }
    let unplanned: Vec<String> = s
        .cells
        .iter()
        .filter(|c| !c.planned)
        .map(|c| format!("{} ({})", clean(&c.label, 28), c.responses))
        .collect();
    if !unplanned.is_empty() {
        out.push_str(&format!(
            "\nunplanned cells (counted, not part of the verdict): {}\n",
            unplanned.join(", ")
        ));
    }
    if !s.unexpected.is_empty() {
        let values: Vec<String> = s
            .unexpected
            .iter()
            .map(|u| {
                format!(
                    "{} '{}' ×{}",
                    clean(&u.measure, 24),
                    clean(&u.value, 24),
                    u.count
                )
            })
            .collect();
        out.push_str(&format!(
            "unexpected answers (left out of the counts): {}\n",
            values.join(", ")
        ));
    }
    if let Some(first) = s.rejections.first() {
        out.push_str(&format!(
            "first rejected row: line {}: {}{}\n",
            first.line,
            clean(&first.reason, 100),
            if s.rows_rejected > 1 {
                " (see --format json for the others)"
            } else {
                ""
            }
        ));
    }
    for cell in &s.cells {
        for w in &cell.warnings {
            out.push_str(&format!("{}: {}\n", clean(&cell.label, 28), clean(w, 120)));
        }
    }
    out.push_str(&format!("\n{CAUTIONS_SHORT}\n"));
    out
}

/// The whole Snapshot as one JSON document.
pub fn status_json(s: &Snapshot) -> serde_json::Value {
    serde_json::to_value(s).unwrap_or(serde_json::Value::Null)
}

/// A field a spreadsheet would run as a formula gets a leading apostrophe.
pub fn neutralise(field: &str) -> String {
    match field.chars().next() {
        Some('=' | '+' | '-' | '@' | '\t' | '\r') => format!("'{field}"),
        _ => field.to_string(),
    }
}

/// One row per cell × measure.
pub fn status_csv(s: &Snapshot, by: &[String]) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header: Vec<String> = vec!["cell".into()];
    header.extend(by.iter().cloned());
    header.extend(
        [
            "planned",
            "responses",
            "minimum",
            "status",
            "cell_needed",
            "rate_per_hour",
            "eta",
            "measure",
            "n",
            "successes",
            "estimate",
            "margin",
            "met",
            "needed",
        ]
        .map(String::from),
    );
    let opt = |x: Option<f64>| x.map_or_else(String::new, |v| v.to_string());
    let mut rows = vec![header];
    for cell in &s.cells {
        for m in &cell.measures {
            let mut row = vec![cell.label.clone()];
            row.extend(
                by.iter()
                    .map(|col| cell.cell.get(col).cloned().unwrap_or_default()),
            );
            row.extend([
                cell.planned.to_string(),
                cell.responses.to_string(),
                cell.minimum.map_or_else(String::new, |v| v.to_string()),
                cell.status.word().to_string(),
                cell.needed.map_or_else(String::new, |v| v.to_string()),
                opt(cell.rate_per_hour),
                cell.eta.map_or_else(String::new, |t| t.to_string()),
                m.name.clone(),
                m.n.to_string(),
                m.successes.to_string(),
                opt(m.estimate),
                opt(m.margin),
                m.met.to_string(),
                m.needed.map_or_else(String::new, |v| v.to_string()),
            ]);
            rows.push(row);
        }
    }
    for row in rows {
        let _ = w.write_record(row.iter().map(|f| neutralise(f)));
    }
    String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
}
