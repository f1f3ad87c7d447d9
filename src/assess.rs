//! The study's verdict at one moment: for every cell and measure the margins, whether
//! the target is met, how many more responses are needed, the recent rate and the ETA,
//! and whether collection can close. Produces a [`Snapshot`], which the reports and the
//! dashboard draw from and never recompute. Knows nothing of terminals or file formats.

use std::collections::BTreeMap;

use jiff::{SignedDuration, Timestamp};
use serde::Serialize;

use crate::bounds::{self, BoundRow, Guarantee, Level, Method, Query};
use crate::report::CAUTIONS;
use crate::study::{Quota, Study};
use crate::tally::{CellKey, CellTally, MeasureTally, Tally};

/// The trailing window the rate is measured over.
pub const RATE_WINDOW_HOURS: i64 = 24;

/// Where a cell stands.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    /// Past the deadline at the current rate, or nothing arrived lately.
    AtRisk,
    /// Still collecting.
    Open,
    /// Every measure within the target and the minimum reached.
    Met,
}

impl Status {
    /// A word that says the status without colour.
    pub fn word(self) -> &'static str {
        match self {
            Status::AtRisk => "at risk",
            Status::Open => "open",
            Status::Met => "met",
        }
    }
}

/// One measure in one cell.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct MeasureView {
    pub name: String,
    /// Yes and no answers.
    pub n: u64,
    pub successes: u64,
    pub missing: u64,
    pub unexpected: u64,
    /// S/n, or the weighted proportion with weights; `None` before any answer.
    pub estimate: Option<f64>,
    /// Kish's effective n with weights.
    pub effective_n: Option<f64>,
    /// The margin under the deciding method; `None` when it gives none yet.
    pub margin: Option<f64>,
    pub met: bool,
    /// More yes/no answers the deciding method needs if the proportion holds.
    pub needed: Option<u64>,
    /// The intervals at the decision level: every method's, in the order of
    /// [`Method::ALL`], from [`assess`], [`assess_by`] and [`Detail::EveryMethod`];
    /// only the deciding method's row (one row, or none before the measure can be
    /// asked about) from [`Detail::Verdict`]. [`every_method`] gives one cell's full
    /// rows afterwards.
    pub bounds: Vec<BoundRow>,
}

/// One cell.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CellView {
    /// The `cells.by` column → the cell's value.
    pub cell: BTreeMap<String, String>,
    /// The values joined for display: `north × 18-44`.
    pub label: String,
    /// In the study's quotas (or, without quotas, observed).
    pub planned: bool,
    pub responses: u64,
    pub minimum: Option<u64>,
    pub population: Option<u64>,
    /// The size the anytime sequence is tuned for (fixed by the study file).
    pub tune_for: u64,
    pub status: Status,
    /// Responses per hour over the trailing window; `None` without arrival times.
    pub rate_per_hour: Option<f64>,
    /// When the cell will be met at that rate.
    pub eta: Option<Timestamp>,
    /// More responses the cell needs (the most any measure needs, scaled by the share
    /// of responses that answer it, and the minimum); `None` when out of reach.
    pub needed: Option<u64>,
    /// Responses against responses plus needed, 0 to 1.
    pub progress: f64,
    pub latest_arrival: Option<Timestamp>,
    pub measures: Vec<MeasureView>,
    /// Why the cell's figures are limited, when they are.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
}

/// A rejected row, for display.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct RejectedRow {
    pub line: u64,
    /// `field_count`, `not_utf8`, `bad_weight`, `negative_weight` or `bad_time`.
    pub kind: &'static str,
    pub reason: String,
}

/// A duplicate id, for display.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct DuplicateRow {
    pub line: u64,
    pub id: String,
}

/// An unexpected answer value and how often it occurred.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct UnexpectedValue {
    pub measure: String,
    pub value: String,
    pub count: u64,
}

/// The whole verdict at one moment.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Snapshot {
    pub title: String,
    pub study_file: String,
    pub source_file: String,
    /// The moment the rates and ETAs refer to.
    pub as_of: Timestamp,
    pub rows_read: u64,
    pub rows_rejected: u64,
    pub duplicates: u64,
    /// Responses counted (neither rejected nor duplicates).
    pub responses: u64,
    pub newest_response: Option<Timestamp>,
    pub decide_by: Method,
    pub guarantee: Guarantee,
    pub margin_target: f64,
    pub confidence: f64,
    /// The confidence each cell × measure statement is made at (lower than
    /// `confidence` with `simultaneous`).
    pub decision_confidence: f64,
    pub simultaneous: bool,
    pub deadline: Option<Timestamp>,
    pub ready_to_close: bool,
    pub cells_planned: usize,
    pub cells_met: usize,
    /// The ETA of the last planned cell still open; `None` when one has no ETA.
    pub last_eta: Option<Timestamp>,
    /// Planned cells first, worst first; unplanned cells after them.
    pub cells: Vec<CellView>,
    pub rejections: Vec<RejectedRow>,
    pub duplicate_ids: Vec<DuplicateRow>,
    pub unexpected: Vec<UnexpectedValue>,
    pub cautions: &'static str,
}

/// What a cell's measures are judged by.
struct Decision {
    level: Level,
    target: f64,
    decide_by: Method,
    tune_for: u64,
    population: Option<u64>,
    weighted: bool,
}

/// The margin question for one measure's tally under a decision.
fn query(tally: &MeasureTally, d: &Decision) -> Result<Query, bounds::BoundsError> {
    Query::new(tally.successes, tally.n, d.level)
        .and_then(|q| q.with_tune_for(d.tune_for))
        .and_then(|q| match d.population {
            Some(total) if total >= tally.n => q.with_population(total),
            _ => Ok(q),
        })
        .and_then(|q| {
            if d.weighted && tally.n > 0 {
                q.with_weights(tally.weights)
            } else {
                Ok(q)
            }
        })
}

/// How much of the methods' side-by-side table an assessment computes. The verdict
/// (margins, met, needed, status, ETAs) is the same either way.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Detail {
    /// Every method's interval in [`MeasureView::bounds`]: what the JSON outputs show.
    #[default]
    EveryMethod,
    /// Only the deciding method's interval in [`MeasureView::bounds`]: all a look at
    /// the verdict needs (the dashboard's table, the text of `status --follow`, the
    /// demo's run). Spares the other methods, the exact worst-case margin above all.
    Verdict,
}

fn measure_view(name: &str, tally: &MeasureTally, d: &Decision, detail: Detail) -> MeasureView {
    let Decision {
        target, decide_by, ..
    } = *d;
    let built = query(tally, d);
    let (bounds, margin, needed, estimate, effective_n) = match built {
        Ok(q) => {
            let rows = match detail {
                Detail::EveryMethod => bounds::intervals(&q),
                Detail::Verdict => vec![bounds::interval(decide_by, &q)],
            };
            let margin = rows.iter().find_map(|r| {
                r.as_ref()
                    .ok()
                    .filter(|i| i.method == decide_by)
                    .map(|i| i.margin)
            });
            // A measure within the target needs none more (`Some(0)` below): the
            // search would only find its own n again.
            let needed = if margin.is_some_and(|m| m <= target) {
                None
            } else {
                bounds::more_needed(decide_by, &q, target).ok().flatten()
            };
            let eff = q.weights().map(|w| w.effective_n());
            (
                rows.iter().map(BoundRow::from).collect(),
                margin,
                needed,
                q.estimate(),
                eff,
            )
        }
        Err(_) => (Vec::new(), None, None, None, None),
    };
    let met = margin.is_some_and(|m| m <= target);
    MeasureView {
        name: name.to_string(),
        n: tally.n,
        successes: tally.successes,
        missing: tally.missing,
        unexpected: tally.unexpected,
        estimate,
        effective_n,
        margin,
        met,
        needed: if met { Some(0) } else { needed },
        bounds,
    }
}

/// Responses per hour over the trailing window ending at `as_of`, from arrival times.
fn rate(cell: &CellTally, study_first: Option<Timestamp>, as_of: Timestamp) -> Option<f64> {
    let first = study_first?;
    let window = SignedDuration::from_hours(RATE_WINDOW_HOURS);
    let span = as_of.duration_since(first).min(window);
    let hours = span.as_secs_f64() / 3600.0;
    if hours <= 0.0 {
        return None;
    }
    let since = as_of.checked_sub(span).unwrap_or(first);
    Some(cell.arrivals.count_since(since) as f64 / hours)
}

struct CellInput<'a> {
    key: CellKey,
    tally: Option<&'a CellTally>,
    quota: Option<&'a Quota>,
    planned: bool,
}

/// The verdict for `study` given its `tally`, as of `as_of` (the moment rates and
/// ETAs refer to).
pub fn assess(study: &Study, tally: &Tally, as_of: Timestamp) -> Snapshot {
    assess_by(study, tally, as_of, study.target.decide_by)
}

/// The verdict as it would be if `decide_by` decided instead of the study's method
/// (a preview: the study itself is unchanged; everything else is as in [`assess`]).
pub fn assess_by(study: &Study, tally: &Tally, as_of: Timestamp, decide_by: Method) -> Snapshot {
    assess_with(study, tally, as_of, decide_by, Detail::EveryMethod)
}

/// The verdict under `decide_by` (the study's own method, or a preview's), with as
/// much of the methods' table as `detail` says; [`assess_by`] is this with
/// [`Detail::EveryMethod`].
pub fn assess_with(
    study: &Study,
    tally: &Tally,
    as_of: Timestamp,
    decide_by: Method,
    detail: Detail,
) -> Snapshot {
    let measure_count = study.measures.len();
    let empty = CellTally::new(Vec::new(), measure_count);
    // Planned cells: the quotas, or without quotas every observed cell.
    let mut inputs: Vec<CellInput> = Vec::new();
    if study.quotas.is_empty() {
        for key in tally.cells.keys() {
            inputs.push(CellInput {
                key: key.clone(),
                tally: tally.cells.get(key),
                quota: None,
                planned: true,
            });
        }
        if study.cells.is_empty() && inputs.is_empty() {
            inputs.push(CellInput {
                key: CellKey(Vec::new()),
                tally: None,
                quota: None,
                planned: true,
            });
        }
    } else {
        for quota in &study.quotas {
            let key = CellKey(
                quota
                    .cell
                    .iter()
                    .map(|v| crate::rows::normalise(v))
                    .collect(),
            );
            inputs.push(CellInput {
                tally: tally.cells.get(&key),
                key,
                quota: Some(quota),
                planned: true,
            });
        }
        for key in tally.cells.keys() {
            if study.quota_for(&key.0).is_none() {
                inputs.push(CellInput {
                    key: key.clone(),
                    tally: tally.cells.get(key),
                    quota: None,
                    planned: false,
                });
            }
        }
    }
    let planned_count = inputs.iter().filter(|c| c.planned).count();
    let level = study.decision_level(planned_count);
    let target = study.target.margin;
    let weighted = study.source.weight.is_some();
    let study_first = tally
        .cells
        .values()
        .filter_map(|c| c.arrivals.first())
        .min();
    let lately = as_of
        .checked_sub(SignedDuration::from_hours(RATE_WINDOW_HOURS))
        .unwrap_or(as_of);

    let context = CellContext {
        study,
        empty: &empty,
        level,
        target,
        decide_by,
        weighted,
        study_first,
        lately,
        as_of,
        detail,
    };
    let mut cells = cell_views(&inputs, &context);
    cells.sort_by(|a, b| {
        (!a.planned, a.status, a.progress)
            .partial_cmp(&(!b.planned, b.status, b.progress))
            .unwrap_or(std::cmp::Ordering::Equal)
            .then_with(|| a.label.cmp(&b.label))
    });

    let planned: Vec<&CellView> = cells.iter().filter(|c| c.planned).collect();
    let cells_met = planned.iter().filter(|c| c.status == Status::Met).count();
    let open: Vec<&&CellView> = planned.iter().filter(|c| c.status != Status::Met).collect();
    let last_eta = if open.iter().all(|c| c.eta.is_some()) {
        open.iter().filter_map(|c| c.eta).max()
    } else {
        None
    };
    let unexpected = study
        .measures
        .iter()
        .zip(&tally.unexpected_values)
        .flat_map(|(m, values)| {
            values.iter().map(|(value, &count)| UnexpectedValue {
                measure: m.name.clone(),
                value: value.clone(),
                count,
            })
        })
        .collect();
    Snapshot {
        title: study.title.clone(),
        study_file: study.study_path.display().to_string(),
        source_file: study.source.file.display().to_string(),
        as_of,
        rows_read: tally.rows_read,
        rows_rejected: tally.rejected,
        duplicates: tally.duplicates,
        responses: tally.responses(),
        newest_response: tally.newest,
        decide_by,
        guarantee: if weighted && !decide_by.rigorous_with_weights() {
            Guarantee::Approximate
        } else {
            decide_by.guarantee()
        },
        margin_target: target,
        confidence: study.target.level.confidence(),
        decision_confidence: level.confidence(),
        simultaneous: study.target.simultaneous,
        deadline: study.target.deadline,
        ready_to_close: !planned.is_empty() && cells_met == planned.len(),
        cells_planned: planned.len(),
        cells_met,
        last_eta,
        cells,
        rejections: tally
            .first_rejections
            .iter()
            .map(|r| RejectedRow {
                line: r.line,
                kind: r.reason.kind(),
                reason: r.reason.to_string(),
            })
            .collect(),
        duplicate_ids: tally
            .first_duplicates
            .iter()
            .map(|(line, id)| DuplicateRow {
                line: *line,
                id: id.clone(),
            })
            .collect(),
        unexpected,
        cautions: CAUTIONS,
    }
}

/// What one cell of a snapshot was judged by (to compute more of it afterwards).
fn decision_for(study: &Study, snapshot: &Snapshot, view: &CellView) -> Decision {
    Decision {
        level: study.decision_level(snapshot.cells_planned),
        target: study.target.margin,
        decide_by: snapshot.decide_by,
        tune_for: view.tune_for,
        population: view.population,
        weighted: study.source.weight.is_some(),
    }
}

/// The cell's deciding margin (its widest measure's) at larger numbers of responses,
/// if every measure's proportion, and the share of responses that answer it, held as
/// they are: what "needed" assumes, drawn as a curve. `points` response counts from
/// the cell's responses now up to `upto`, each with its margin; empty when the cell
/// has no responses yet or is not in `snapshot`. Uses the snapshot's deciding method
/// (so a preview's curve is the previewed method's).
pub fn projection(
    study: &Study,
    tally: &Tally,
    snapshot: &Snapshot,
    label: &str,
    upto: u64,
    points: usize,
) -> Vec<(u64, f64)> {
    let Some(view) = snapshot.cells.iter().find(|c| c.label == label) else {
        return Vec::new();
    };
    let Some(cell) = tally.cells.get(&tally_key(study, view)) else {
        return Vec::new();
    };
    let now = cell.responses;
    if now == 0 || points == 0 {
        return Vec::new();
    }
    let d = decision_for(study, snapshot, view);
    let queries: Vec<(Query, f64)> = cell
        .measures
        .iter()
        .filter(|m| m.n > 0)
        .filter_map(|m| Some((query(m, &d).ok()?, m.n as f64 / now as f64)))
        .collect();
    let upto = upto.max(now);
    let steps = points.max(2) - 1;
    let mut out: Vec<(u64, f64)> = Vec::with_capacity(points);
    for i in 0..=steps {
        let responses = now + ((upto - now) as f64 * i as f64 / steps as f64).round() as u64;
        if out.last().is_some_and(|&(r, _)| r == responses) {
            continue;
        }
        let widest = queries.iter().try_fold(None::<f64>, |widest, (q, share)| {
            let n = ((responses as f64 * share).round() as u64).max(1);
            match bounds::projected_margin(d.decide_by, q, n) {
                Some(Ok(m)) => Some(Some(widest.map_or(m, |w: f64| w.max(m)))),
                _ => None,
            }
        });
        if let Some(Some(margin)) = widest {
            out.push((responses, margin));
        }
    }
    out
}

/// Every method's interval for each measure of one cell of `snapshot` (by label), in
/// the order of the cell's measures, each as [`MeasureView::bounds`] holds it under
/// [`Detail::EveryMethod`]: the cell page's table when the snapshot was assessed with
/// [`Detail::Verdict`]. Empty when the cell is not in `snapshot`.
pub fn every_method(
    study: &Study,
    tally: &Tally,
    snapshot: &Snapshot,
    label: &str,
) -> Vec<Vec<BoundRow>> {
    let Some(view) = snapshot.cells.iter().find(|c| c.label == label) else {
        return Vec::new();
    };
    let d = decision_for(study, snapshot, view);
    let none = MeasureTally::default();
    let measures = tally
        .cells
        .get(&tally_key(study, view))
        .map_or(&[][..], |c| &c.measures[..]);
    study
        .measures
        .iter()
        .zip(measures.iter().chain(std::iter::repeat(&none)))
        .map(|(_, m)| match query(m, &d) {
            Ok(q) => bounds::intervals(&q).iter().map(BoundRow::from).collect(),
            Err(_) => Vec::new(),
        })
        .collect()
}

/// The key under which the tally holds a cell of a snapshot.
pub fn tally_key(study: &Study, cell: &CellView) -> CellKey {
    CellKey(
        study
            .cells
            .iter()
            .map(|column| crate::rows::normalise(cell.cell.get(column).map_or("", String::as_str)))
            .collect(),
    )
}

/// What every cell's view is computed from, besides the cell itself.
struct CellContext<'a> {
    study: &'a Study,
    empty: &'a CellTally,
    level: Level,
    target: f64,
    decide_by: Method,
    weighted: bool,
    study_first: Option<Timestamp>,
    lately: Timestamp,
    as_of: Timestamp,
    detail: Detail,
}

/// Cells at least this many are shared out over the cores.
const CELLS_PER_CORE: usize = 4;

/// The view of every cell, in the order of `inputs`. Each cell is independent of the
/// others (the margin engine's memo is shared and gives the same numbers whichever
/// thread fills it), so they are computed on up to
/// [`std::thread::available_parallelism`] threads. Each thread takes the next cell
/// not yet taken, the cells with the most responses first (the cost grows with the
/// size), so the threads end within about one small cell of each other whatever the
/// mix of cells, and a thread whose core is busy with other work takes fewer.
fn cell_views(inputs: &[CellInput<'_>], context: &CellContext<'_>) -> Vec<CellView> {
    crate::parallel::map_costliest_first(
        inputs,
        CELLS_PER_CORE,
        |input| input.tally.map_or(0, |t| t.responses),
        |input| cell_view(input, context),
    )
}

/// One cell's view.
fn cell_view(input: &CellInput<'_>, context: &CellContext<'_>) -> CellView {
    let CellContext {
        study,
        empty,
        level,
        target,
        decide_by,
        weighted,
        study_first,
        lately,
        as_of,
        detail,
    } = *context;

    let t = input.tally.unwrap_or(empty);
    let tune_for = study.tune_for(input.quota);
    let population = input.quota.and_then(|q| q.population);
    let minimum = input.quota.and_then(|q| q.minimum);
    let mut warnings = Vec::new();
    if let Some(total) = population
        && t.responses > total
    {
        warnings.push(format!(
            "{} responses exceed the cell's population of {total}: the population is not used",
            t.responses
        ));
    }
    let measures: Vec<MeasureView> = study
        .measures
        .iter()
        .zip(
            t.measures
                .iter()
                .chain(std::iter::repeat(&MeasureTally::default())),
        )
        .map(|(m, mt)| {
            let d = Decision {
                level,
                target,
                decide_by,
                tune_for,
                population,
                weighted,
            };
            measure_view(&m.name, mt, &d, detail)
        })
        .collect();
    // Needed responses: each measure's need scaled by the share of responses
    // that answer it yes or no, and the minimum.
    let mut needed = Some(minimum.unwrap_or(0).saturating_sub(t.responses));
    for m in &measures {
        let scaled = m.needed.map(|k| {
            if m.n == 0 || t.responses == 0 {
                k
            } else {
                (k as f64 * t.responses as f64 / m.n as f64).ceil() as u64
            }
        });
        needed = match (needed, scaled) {
            (Some(a), Some(b)) => Some(a.max(b)),
            _ => None,
        };
    }
    let met = measures.iter().all(|m| m.met) && t.responses >= minimum.unwrap_or(0);
    let rate_per_hour = rate(t, study_first, as_of);
    let eta = match (met, needed, rate_per_hour) {
        (false, Some(k), Some(r)) if r > 0.0 => {
            let secs = (k as f64 / r * 3600.0).min(1e12).round() as i64;
            as_of.checked_add(SignedDuration::from_secs(secs)).ok()
        }
        _ => None,
    };
    let quiet = t.arrivals.latest().is_none_or(|l| l < lately) && rate_per_hour.is_some();
    let late = matches!((eta, study.target.deadline), (Some(e), Some(d)) if e > d);
    let past_deadline = study.target.deadline.is_some_and(|d| as_of > d);
    let status = if met {
        Status::Met
    } else if input.planned && (quiet || late || past_deadline || rate_per_hour == Some(0.0)) {
        Status::AtRisk
    } else {
        Status::Open
    };
    let progress = match needed {
        _ if met => 1.0,
        Some(k) if t.responses + k > 0 => t.responses as f64 / (t.responses + k) as f64,
        _ => 0.0,
    };
    let values: Vec<String> = match input.quota {
        Some(q) => q.cell.clone(),
        None if !t.label.is_empty() => t.label.clone(),
        None => input.key.0.clone(),
    };
    let label = if values.is_empty() {
        "all responses".to_string()
    } else {
        values.join(" × ")
    };
    CellView {
        cell: study.cells.iter().cloned().zip(values).collect(),
        label,
        planned: input.planned,
        responses: t.responses,
        minimum,
        population,
        tune_for,
        status,
        rate_per_hour,
        eta,
        needed: if met { Some(0) } else { needed },
        progress,
        latest_arrival: t.arrivals.latest(),
        measures,
        warnings,
    }
}
