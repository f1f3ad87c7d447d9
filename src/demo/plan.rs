//! The simulated fieldwork as a plan: every change to the responses file, each at a
//! simulated moment, drawn from one seed (ChaCha8). Nothing here touches a file.
//!
//! Respondents arrive in each cell as a Poisson process whose rate follows the
//! scenario's daily rhythm; the exporter appends what arrived every ten simulated
//! minutes (from 09:00 on the first day). A few rows are malformed, a few
//! respondents send their answers twice, now and then an export is written in two
//! pieces (a row cut in the middle, finished 25 simulated seconds later), and once the
//! exporter rewrites the whole file under a temporary name and renames it over the
//! old one. Like a supervisor who stops inviting a cell once closeout says it is met,
//! the plan closes each cell at the first export after which the deciding method's
//! margins are within the target and the minimum is reached, and ends when every cell
//! is closed (or two days after the deadline, whatever happens).

use std::path::Path;

use jiff::{SignedDuration, Timestamp};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::scenario::{self, AGE_BANDS, MEASURES, ZONES};
use crate::bounds::{self, Level, Method, Query};
use crate::study::{Study, StudyError};

/// Minutes between two exports.
pub const EXPORT_EVERY_MINUTES: i64 = 10;
/// The first export, two hours after the start (a soft launch).
pub const FIRST_EXPORT_AFTER_MINUTES: i64 = 120;
/// The share of rows the exporter writes malformed.
pub const MALFORMED_SHARE: f64 = 0.003;
/// The share of arrivals followed by a second copy of an earlier response.
pub const DUPLICATE_SHARE: f64 = 0.003;
/// The share of exports written in two pieces.
pub const SPLIT_SHARE: f64 = 0.02;
/// Simulated seconds between the two pieces of a split export.
pub const SPLIT_GAP_SECONDS: i64 = 25;
/// The whole file is rewritten once, at the first export from this moment on
/// (a Wednesday lunchtime), a minute after that export.
pub const REWRITE_FROM: &str = "2026-03-04T13:00:00Z";
/// Every plan has at least one split export, the first one from this moment on.
pub const FIRST_SPLIT_FROM: &str = "2026-03-03T10:00:00Z";

/// The file the responses are written to, in the demo's folder.
pub const RESPONSES: &str = "responses.csv";

/// One change to the responses file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum FileAction {
    /// Append these bytes (creating the file if needed); they may end in the middle
    /// of a row.
    Append(Vec<u8>),
    /// Write these bytes under a temporary name in the same folder, then rename that
    /// file over the responses file (an atomic replacement).
    Replace(Vec<u8>),
}

/// A change and the simulated moment it happens at.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Action {
    pub at: Timestamp,
    pub file: FileAction,
}

/// What one row of the file is, as planned.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum RowKind {
    /// A response closeout counts.
    Counted,
    /// A second copy of the response on `of_line` (same id): counted as a duplicate.
    Duplicate { of_line: u64 },
    /// A malformed row, rejected for this reason (`rows::Reason::kind`).
    Malformed { kind: &'static str },
}

/// One row of the file, as planned.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PlannedRow {
    /// The line it is on (the header is line 1).
    pub line: u64,
    pub id: String,
    /// Zone and age band (indexes into the scenario's lists).
    pub cell: (usize, usize),
    pub kind: RowKind,
}

/// The true proportions of one cell, and whether they are a finite population's.
#[derive(Clone, Debug, PartialEq)]
pub struct CellTruth {
    pub cell: (usize, usize),
    pub label: String,
    /// Per measure, the proportion of yes among yes/no answers: the scenario's value,
    /// or, in a cell with a population, the proportion in the population drawn for
    /// this seed (what the finite population correction estimates).
    pub proportions: [f64; 3],
    pub population: Option<u64>,
}

/// A moment of the story, for the demo's introduction.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Moment {
    pub at: Timestamp,
    pub what: String,
}

/// The whole simulated fieldwork.
#[derive(Clone, Debug)]
pub struct Plan {
    pub seed: u64,
    pub start: Timestamp,
    /// The moment of the last action.
    pub end: Timestamp,
    pub study_text: String,
    pub actions: Vec<Action>,
    pub rows: Vec<PlannedRow>,
    pub truth: Vec<CellTruth>,
    pub story: Vec<Moment>,
    /// Every cell closed (met) by the end.
    pub all_closed: bool,
}

/// An answer as drawn: blank, "don't know", yes or no.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Drawn {
    Blank,
    Unsure,
    Yes,
    No,
}

fn draw_answers(rng: &mut ChaCha8Rng, p: &[f64; 3]) -> [Drawn; 3] {
    let mut out = [Drawn::Blank; 3];
    for ((slot, spec), &p) in out.iter_mut().zip(MEASURES.iter()).zip(p.iter()) {
        let u: f64 = rng.random();
        let unsure = spec.unsure.map_or(0.0, |(_, share)| share);
        *slot = if u < spec.blank {
            Drawn::Blank
        } else if u < spec.blank + unsure {
            Drawn::Unsure
        } else if rng.random_bool(p.clamp(0.0, 1.0)) {
            Drawn::Yes
        } else {
            Drawn::No
        };
    }
    out
}

/// The raw answer text for a drawn answer.
fn answer_text(rng: &mut ChaCha8Rng, measure: usize, a: Drawn) -> &'static str {
    let Some(spec) = MEASURES.get(measure) else {
        return "";
    };
    let pick = |rng: &mut ChaCha8Rng, list: &'static [&'static str]| -> &'static str {
        if list.is_empty() {
            ""
        } else {
            list.get(rng.random_range(0..list.len()))
                .copied()
                .unwrap_or("")
        }
    };
    match a {
        Drawn::Blank => "",
        Drawn::Unsure => spec.unsure.map_or("", |(text, _)| text),
        Drawn::Yes => pick(rng, spec.yes),
        Drawn::No => pick(rng, spec.no),
    }
}

/// A Poisson draw (Knuth's product of uniforms; the means here are small).
fn poisson(rng: &mut ChaCha8Rng, mean: f64) -> u64 {
    if mean <= 0.0 {
        return 0;
    }
    if mean > 50.0 {
        // Not reached by the scenario; a normal approximation keeps it bounded.
        let z: f64 = (0..12).map(|_| rng.random::<f64>()).sum::<f64>() - 6.0;
        return (mean + z * mean.sqrt()).round().max(0.0) as u64;
    }
    let limit = (-mean).exp();
    let mut k = 0;
    let mut product: f64 = rng.random();
    while product > limit {
        k += 1;
        product *= rng.random::<f64>();
    }
    k
}

struct CellState {
    cell: (usize, usize),
    truth: [f64; 3],
    /// The population's members' answers, in the order they will respond.
    members: Option<Vec<[Drawn; 3]>>,
    next_member: usize,
    responses: u64,
    n: [u64; 3],
    yes: [u64; 3],
    open: bool,
    minimum: u64,
    population: Option<u64>,
    tune_for: u64,
}

impl CellState {
    fn count(&mut self, answers: &[Drawn; 3]) {
        self.responses += 1;
        for (m, a) in answers.iter().enumerate() {
            if let (Some(n), Some(y)) = (self.n.get_mut(m), self.yes.get_mut(m)) {
                match a {
                    Drawn::Yes => {
                        *n += 1;
                        *y += 1;
                    }
                    Drawn::No => *n += 1,
                    Drawn::Blank | Drawn::Unsure => {}
                }
            }
        }
    }

    /// Whether closeout's verdict calls this cell met: every measure's margin under
    /// the deciding method within the target, and the minimum reached (the rule of
    /// `assess`, applied to the counts the plan knows).
    fn met(&self, method: Method, level: Level, target: f64) -> bool {
        if self.responses < self.minimum {
            return false;
        }
        self.n.iter().zip(self.yes.iter()).all(|(&n, &s)| {
            let q = Query::new(s, n, level)
                .and_then(|q| q.with_tune_for(self.tune_for))
                .and_then(|q| match self.population {
                    Some(total) if total >= n => q.with_population(total),
                    _ => Ok(q),
                });
            match q {
                Ok(q) => bounds::interval(method, &q).is_ok_and(|i| i.margin <= target),
                Err(_) => false,
            }
        })
    }
}

/// A row being written: everything but its place in the file.
struct Row {
    at: Timestamp,
    cell: (usize, usize),
    id: String,
    answers: [Drawn; 3],
    kind: RowKind,
}

fn two_digits(out: &mut String, v: i8) {
    out.push(char::from(b'0' + (v / 10) as u8));
    out.push(char::from(b'0' + (v % 10) as u8));
}

/// The text of one row, with its line end.
fn row_text(rng: &mut ChaCha8Rng, row: &Row, boosted: bool) -> String {
    let (z, a) = row.cell;
    let channel_draw: f64 = rng.random();
    let phone_share = if boosted { 0.7 } else { 0.3 };
    let (channel, interviewer) = if channel_draw < phone_share {
        ("telephone", format!("IV-{:04}", rng.random_range(1..=16)))
    } else if channel_draw < phone_share + 0.12 {
        ("in-person", format!("IV-{:04}", rng.random_range(1..=16)))
    } else {
        ("online", "web".to_string())
    };
    let time = match row.kind {
        RowKind::Malformed { kind: "bad_time" } => {
            // A day-first local form instead of RFC 3339: an exporter's setting gone wrong.
            let civil = row.at.to_zoned_datetime(jiff::tz::TimeZone::UTC);
            let mut t = String::new();
            two_digits(&mut t, civil.day());
            t.push('/');
            two_digits(&mut t, civil.month());
            t.push_str(&format!("/{} ", civil.year()));
            two_digits(&mut t, civil.hour());
            t.push(':');
            two_digits(&mut t, civil.minute());
            t
        }
        _ => row.at.to_string(),
    };
    let answers: Vec<&str> = (0..3)
        .map(|m| answer_text(rng, m, row.answers.get(m).copied().unwrap_or(Drawn::Blank)))
        .collect();
    let minutes = rng.random_range(400..3000) as f64 / 100.0;
    let mut text = format!(
        "{},{},{},{},{},{},{},{},{}",
        row.id,
        time,
        ZONES.get(z).unwrap_or(&""),
        AGE_BANDS.get(a).unwrap_or(&""),
        channel,
        interviewer,
        answers.first().unwrap_or(&""),
        answers.get(1).unwrap_or(&""),
        answers.get(2).unwrap_or(&""),
    );
    // A row that lost its last field (a tablet's export cut short) has 9 fields.
    if row.kind
        != (RowKind::Malformed {
            kind: "field_count",
        })
    {
        text.push_str(&format!(",{minutes:.2}"));
    }
    text.push('\n');
    text
}

/// The header line.
pub fn header() -> String {
    let mut h = scenario::COLUMNS.join(",");
    h.push('\n');
    h
}

/// The same CSV with every field quoted, as another exporter setting would write it
/// (the fields hold no quotes, commas or line breaks).
fn quoted(text: &str) -> String {
    let mut out = String::with_capacity(text.len() * 5 / 4);
    for line in text.split_inclusive('\n') {
        let body = line.strip_suffix('\n').unwrap_or(line);
        let fields: Vec<String> = body.split(',').map(|f| format!("\"{f}\"")).collect();
        out.push_str(&fields.join(","));
        if line.ends_with('\n') {
            out.push('\n');
        }
    }
    out
}

fn parse(text: &str) -> Timestamp {
    text.parse().unwrap_or(Timestamp::UNIX_EPOCH)
}

fn minutes(m: i64) -> SignedDuration {
    SignedDuration::from_mins(m)
}

fn after(t: Timestamp, d: SignedDuration) -> Timestamp {
    t.checked_add(d).unwrap_or(Timestamp::MAX)
}

/// Draw the whole fieldwork for `seed`.
pub fn plan(seed: u64) -> Result<Plan, StudyError> {
    let study_text = scenario::study_text(seed, RESPONSES);
    let study = Study::parse(&study_text, Path::new("study.toml"))?;
    let level = study.decision_level(study.quotas.len());
    let method = study.target.decide_by;
    let target = study.target.margin;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let start = scenario::start();
    let boost_from = scenario::boost_from();
    let rewrite_from = parse(REWRITE_FROM);
    let first_split_from = parse(FIRST_SPLIT_FROM);
    let give_up = scenario::give_up();

    let mut cells: Vec<CellState> = Vec::new();
    for z in 0..ZONES.len() {
        for a in 0..AGE_BANDS.len() {
            let p = scenario::true_proportions(z, a);
            let population = scenario::population(z, a);
            let quota = study.quota_for(&[
                crate::rows::normalise(ZONES.get(z).unwrap_or(&"")),
                crate::rows::normalise(AGE_BANDS.get(a).unwrap_or(&"")),
            ]);
            let members = population.map(|size| {
                let mut members: Vec<[Drawn; 3]> =
                    (0..size).map(|_| draw_answers(&mut rng, &p)).collect();
                // Who responds first is random: shuffle (Fisher–Yates).
                for i in (1..members.len()).rev() {
                    let j = rng.random_range(0..=i);
                    members.swap(i, j);
                }
                members
            });
            cells.push(CellState {
                cell: (z, a),
                truth: p,
                members,
                next_member: 0,
                responses: 0,
                n: [0; 3],
                yes: [0; 3],
                open: true,
                minimum: scenario::minimum(z, a).unwrap_or(0),
                population,
                tune_for: study.tune_for(quota),
            });
        }
    }
    let truth = cells
        .iter()
        .map(|c| {
            let proportions = match &c.members {
                Some(members) => {
                    let mut out = [0.0; 3];
                    for (m, slot) in out.iter_mut().enumerate() {
                        let yes = members
                            .iter()
                            .filter(|x| x.get(m) == Some(&Drawn::Yes))
                            .count();
                        let no = members
                            .iter()
                            .filter(|x| x.get(m) == Some(&Drawn::No))
                            .count();
                        *slot = if yes + no == 0 {
                            0.0
                        } else {
                            yes as f64 / (yes + no) as f64
                        };
                    }
                    out
                }
                None => c.truth,
            };
            CellTruth {
                cell: c.cell,
                label: scenario::label(c.cell.0, c.cell.1),
                proportions,
                population: c.population,
            }
        })
        .collect();

    let mut actions = vec![Action {
        at: start,
        file: FileAction::Append(header().into_bytes()),
    }];
    let mut story = vec![
        Moment {
            at: start,
            what: "fieldwork starts; the responses file holds only its header".into(),
        },
        Moment {
            at: after(start, minutes(FIRST_EXPORT_AFTER_MINUTES)),
            what: format!(
                "the first export; from now on the exporter appends what arrived every {EXPORT_EVERY_MINUTES} minutes"
            ),
        },
    ];
    let mut written = header();
    let mut rows: Vec<PlannedRow> = Vec::new();
    // Lines (indexes into `rows`) of counted responses, for duplicates to copy.
    let mut counted: Vec<(usize, [Drawn; 3])> = Vec::new();
    let mut next_id: u64 = 1;
    let mut window_start = start;
    let mut export = after(start, minutes(FIRST_EXPORT_AFTER_MINUTES));
    let mut split_done = false;
    let mut rewrite_done = false;
    let mut end = start;
    let mut all_closed = false;
    while export <= give_up {
        // Arrivals in [window_start, export), cell by cell, at the rate of the
        // window's middle.
        let span = export.duration_since(window_start);
        let middle = after(window_start, span / 2);
        let hours = span.as_secs_f64() / 3600.0;
        let mut batch: Vec<Row> = Vec::new();
        for c in cells.iter_mut().filter(|c| c.open) {
            let (z, a) = c.cell;
            let boost = if (z, a) == scenario::SLOW_CELL && middle >= boost_from {
                scenario::BOOST
            } else {
                1.0
            };
            let k = poisson(
                &mut rng,
                scenario::hourly_rate(z, a, middle) * boost * hours,
            );
            for _ in 0..k {
                let answers = match &c.members {
                    Some(members) => match members.get(c.next_member) {
                        Some(m) => {
                            c.next_member += 1;
                            *m
                        }
                        None => break, // everyone in the population has answered
                    },
                    None => draw_answers(&mut rng, &c.truth),
                };
                let offset = rng.random_range(0..span.as_secs().max(1));
                let at = after(window_start, SignedDuration::from_secs(offset));
                let kind = if rng.random_bool(MALFORMED_SHARE) {
                    if rng.random_bool(0.6) {
                        RowKind::Malformed {
                            kind: "field_count",
                        }
                    } else {
                        RowKind::Malformed { kind: "bad_time" }
                    }
                } else {
                    RowKind::Counted
                };
                batch.push(Row {
                    at,
                    cell: (z, a),
                    id: String::new(), // given in order of arrival, below
                    answers,
                    kind,
                });
            }
        }
        // Second copies of earlier responses (a form sent twice), from any cell.
        let arrivals = batch.len();
        for _ in 0..arrivals {
            if counted.is_empty() || !rng.random_bool(DUPLICATE_SHARE) {
                continue;
            }
            let pick = rng.random_range(0..counted.len());
            let Some(&(index, answers)) = counted.get(pick) else {
                continue;
            };
            let Some(original) = rows.get(index) else {
                continue;
            };
            let offset = rng.random_range(0..span.as_secs().max(1));
            batch.push(Row {
                at: after(window_start, SignedDuration::from_secs(offset)),
                cell: original.cell,
                id: original.id.clone(),
                answers,
                kind: RowKind::Duplicate {
                    of_line: original.line,
                },
            });
        }
        batch.sort_by_key(|r| r.at);
        for row in batch.iter_mut().filter(|r| r.id.is_empty()) {
            row.id = format!("OV26-R{next_id:06}");
            next_id += 1;
        }
        if !batch.is_empty() {
            let mut text = String::new();
            let mut row_starts = Vec::new();
            let mut touched = Vec::new();
            for row in &batch {
                let boosted = row.cell == scenario::SLOW_CELL && row.at >= boost_from;
                row_starts.push(text.len());
                text.push_str(&row_text(&mut rng, row, boosted));
                let line = rows.len() as u64 + 2;
                if row.kind == RowKind::Counted {
                    counted.push((rows.len(), row.answers));
                    if let Some(c) = cells.iter_mut().find(|c| c.cell == row.cell) {
                        c.count(&row.answers);
                        touched.push(row.cell);
                    }
                }
                rows.push(PlannedRow {
                    line,
                    id: row.id.clone(),
                    cell: row.cell,
                    kind: row.kind,
                });
            }
            let split = (!split_done && export >= first_split_from) || rng.random_bool(SPLIT_SHARE);
            if split {
                // Cut one row in the middle: the rest follows a little later.
                let which = rng.random_range(0..row_starts.len());
                let row_start = row_starts.get(which).copied().unwrap_or(0);
                let row_end = row_starts.get(which + 1).copied().unwrap_or(text.len());
                let cut = row_start + 1 + rng.random_range(0..(row_end - row_start - 1).max(1));
                let cut = cut.min(row_end.saturating_sub(1)).max(row_start + 1);
                let bytes = text.as_bytes();
                let second = after(export, SignedDuration::from_secs(SPLIT_GAP_SECONDS));
                actions.push(Action {
                    at: export,
                    file: FileAction::Append(bytes.get(..cut).unwrap_or_default().to_vec()),
                });
                actions.push(Action {
                    at: second,
                    file: FileAction::Append(bytes.get(cut..).unwrap_or_default().to_vec()),
                });
                if !split_done {
                    story.push(Moment {
                        at: export,
                        what: format!(
                            "the exporter writes a row in two pieces, {SPLIT_GAP_SECONDS} s apart (and now and then again)"
                        ),
                    });
                }
                split_done = true;
                end = second;
            } else {
                actions.push(Action {
                    at: export,
                    file: FileAction::Append(text.clone().into_bytes()),
                });
                end = export;
            }
            written.push_str(&text);
            touched.sort_unstable();
            touched.dedup();
            for cell in touched {
                if let Some(c) = cells.iter_mut().find(|c| c.cell == cell)
                    && c.open
                    && c.met(method, level, target)
                {
                    c.open = false;
                }
            }
        }
        if !rewrite_done && export >= rewrite_from {
            let at = after(export, minutes(1));
            actions.push(Action {
                at,
                file: FileAction::Replace(quoted(&written).into_bytes()),
            });
            story.push(Moment {
                at,
                what: "the exporter rewrites the whole file (every field quoted) under a temporary name and renames it over the old one".into(),
            });
            rewrite_done = true;
            end = end.max(at);
        }
        if cells.iter().all(|c| !c.open) {
            all_closed = true;
            break;
        }
        window_start = export;
        export = after(export, minutes(EXPORT_EVERY_MINUTES));
    }
    story.push(Moment {
        at: boost_from,
        what: format!(
            "extra phone interviewing starts in {}, the cell that lags",
            scenario::label(scenario::SLOW_CELL.0, scenario::SLOW_CELL.1)
        ),
    });
    story.sort_by_key(|m| m.at);
    Ok(Plan {
        seed,
        start,
        end,
        study_text,
        actions,
        rows,
        truth,
        story,
        all_closed,
    })
}
