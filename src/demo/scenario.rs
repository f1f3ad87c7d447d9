//! The demo's scenario, invented from start to finish: a riders' survey of the bus
//! and ferry services of the Ostrell valley, for the Ostrell Valley Transport Trust.
//! Neither the valley, its six zones nor the trust exist; the true proportions,
//! response rates and every response are made up. The scenario is fixed (the seed
//! changes only the draws): 24 quota cells (six zones × four age bands), three
//! measures, minimums and populations for some cells, a deadline, and one cell that
//! answers slowly until extra phone interviewing starts there.

use jiff::{SignedDuration, Timestamp};

/// The zones of the invented valley.
pub const ZONES: [&str; 6] = [
    "weirside",
    "kilnbrook",
    "saltings",
    "tollgate",
    "fernhollow",
    "highmoor",
];

/// The age bands.
pub const AGE_BANDS: [&str; 4] = ["18-34", "35-54", "55-74", "75+"];

/// The moment the simulated fieldwork starts (a Monday morning).
pub const START: &str = "2026-03-02T07:00:00Z";

/// The study's deadline (the Friday of the second week, evening).
pub const DEADLINE: &str = "2026-03-13T18:00:00Z";

/// The cell that lags, by zone and age band.
pub const SLOW_CELL: (usize, usize) = (4, 0);

/// How much more often the slow cell answers once extra interviewing starts there.
pub const BOOST: f64 = 4.5;

/// When the extra interviewing starts: the Thursday morning of the first week.
pub const BOOST_FROM: &str = "2026-03-05T08:00:00Z";

/// The target: ±10 points at 95 %, decided by the default method (anytime).
pub const MARGIN: f64 = 0.10;

/// The measures: name, column, answers counted as yes, as no, and the other answers
/// a respondent may give ("don't know"), which closeout leaves out of the counts.
pub struct MeasureSpec {
    pub name: &'static str,
    pub column: &'static str,
    pub yes: &'static [&'static str],
    pub no: &'static [&'static str],
    /// The "don't know" answer and its share of answers, if the question has one.
    pub unsure: Option<(&'static str, f64)>,
    /// The share of blank answers.
    pub blank: f64,
}

pub const MEASURES: [MeasureSpec; 3] = [
    MeasureSpec {
        name: "satisfied",
        column: "q_overall",
        yes: &["4", "5"],
        no: &["1", "2", "3"],
        unsure: Some(("dk", 0.05)),
        blank: 0.03,
    },
    MeasureSpec {
        name: "rides_weekly",
        column: "q_weekly",
        yes: &["yes"],
        no: &["no"],
        unsure: None,
        blank: 0.02,
    },
    MeasureSpec {
        name: "backs_ferry_link",
        column: "q_ferry",
        yes: &["for"],
        no: &["against"],
        unsure: Some(("unsure", 0.12)),
        blank: 0.04,
    },
];

/// The columns of the responses file, in order.
pub const COLUMNS: [&str; 10] = [
    "respondent_id",
    "submitted_at",
    "zone",
    "age_band",
    "channel",
    "interviewer",
    "q_overall",
    "q_weekly",
    "q_ferry",
    "minutes",
];

fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// The true proportion of yes among yes/no answers, for each measure, in a cell:
/// an intercept plus a zone and an age effect on the log-odds scale, rounded to
/// three decimals. Invented numbers.
pub fn true_proportions(zone: usize, age: usize) -> [f64; 3] {
    const SATISFIED: (f64, [f64; 6], [f64; 4]) =
        (0.2, [0.3, -0.2, 0.1, -0.5, 0.0, 0.5], [-0.4, 0.0, 0.2, 0.6]);
    const WEEKLY: (f64, [f64; 6], [f64; 4]) = (
        0.3,
        [0.6, 0.2, -0.3, 0.4, -0.6, -0.9],
        [0.7, 0.3, -0.3, -0.8],
    );
    const FERRY: (f64, [f64; 6], [f64; 4]) = (
        -0.1,
        [0.5, -0.2, 0.9, -0.4, 0.1, -0.6],
        [0.2, 0.1, -0.1, -0.3],
    );
    [SATISFIED, WEEKLY, FERRY].map(|(a, z, g)| {
        let p = logistic(a + z.get(zone).unwrap_or(&0.0) + g.get(age).unwrap_or(&0.0));
        (p * 1000.0).round() / 1000.0
    })
}

/// Responses a cell sends on an ordinary weekday (before any extra effort).
pub fn daily_responses(zone: usize, age: usize) -> f64 {
    if (zone, age) == SLOW_CELL {
        return 14.0;
    }
    const ZONE: [f64; 6] = [1.2, 1.0, 0.9, 1.1, 0.85, 0.8];
    const AGE: [f64; 4] = [0.9, 1.1, 1.15, 0.8];
    62.0 * ZONE.get(zone).unwrap_or(&1.0) * AGE.get(age).unwrap_or(&1.0)
}

/// The quota's minimum count, for the cells that have one.
pub fn minimum(zone: usize, age: usize) -> Option<u64> {
    match (zone, age) {
        (0, 1) | (0, 2) => Some(300), // the trust wants more in its busiest zone
        (3, _) => Some(150),
        _ => None,
    }
}

/// The cell's population, for the small cells where the finite population
/// correction matters.
pub fn population(zone: usize, age: usize) -> Option<u64> {
    match (zone, age) {
        (5, 3) => Some(460),
        (4, 3) => Some(610),
        (2, 3) => Some(900),
        (5, 0) => Some(1200),
        _ => None,
    }
}

/// The share of a day's responses arriving in each hour (UTC; the valley keeps UTC):
/// none at night, a morning and an evening peak. Sums to 1.
pub const HOURS: [f64; 24] = {
    let raw = [
        0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, // 00–06
        2.0, 5.0, 6.0, 6.0, 7.0, 8.0, 7.0, // 07–13
        6.0, 6.0, 7.0, 9.0, 10.0, 9.0, 7.0, 5.0, // 14–21
        0.0, 0.0, // 22–23
    ];
    let mut total = 0.0;
    let mut i = 0;
    while i < 24 {
        total += raw[i];
        i += 1;
    }
    let mut out = [0.0; 24];
    let mut j = 0;
    while j < 24 {
        out[j] = raw[j] / total;
        j += 1;
    }
    out
};

/// Weekends bring this share of a weekday's responses.
pub const WEEKEND: f64 = 0.55;

/// Expected responses per hour for a cell at moment `t`, before any boost.
pub fn hourly_rate(zone: usize, age: usize, t: Timestamp) -> f64 {
    let civil = t.to_zoned_datetime(jiff::tz::TimeZone::UTC);
    let hour = usize::try_from(civil.hour()).unwrap_or(0);
    let weekend = matches!(
        civil.weekday(),
        jiff::civil::Weekday::Saturday | jiff::civil::Weekday::Sunday
    );
    let day = daily_responses(zone, age) * if weekend { WEEKEND } else { 1.0 };
    day * HOURS.get(hour).unwrap_or(&0.0)
}

/// The scenario's fixed moments, parsed.
pub fn start() -> Timestamp {
    START.parse().unwrap_or(Timestamp::UNIX_EPOCH)
}

pub fn deadline() -> Timestamp {
    DEADLINE.parse().unwrap_or(Timestamp::UNIX_EPOCH)
}

pub fn boost_from() -> Timestamp {
    BOOST_FROM.parse().unwrap_or(Timestamp::UNIX_EPOCH)
}

/// The latest moment the simulated fieldwork runs to, whatever happens: two days
/// past the deadline.
pub fn give_up() -> Timestamp {
    deadline()
        .checked_add(SignedDuration::from_hours(48))
        .unwrap_or(Timestamp::MAX)
}

/// A cell's label as closeout shows it: `fernhollow × 18-34`.
pub fn label(zone: usize, age: usize) -> String {
    format!(
        "{} × {}",
        ZONES.get(zone).unwrap_or(&"?"),
        AGE_BANDS.get(age).unwrap_or(&"?")
    )
}

/// The study file the demo writes.
pub fn study_text(seed: u64, responses: &str) -> String {
    let mut s = String::new();
    s.push_str(&format!(
        "# An INVENTED study with INVENTED data, written by `closeout demo` (seed {seed}).\n\
         # The Ostrell valley, its zones and the Ostrell Valley Transport Trust are made up:\n\
         # no real people, places or organisation. The times are simulated, starting {START}.\n\
         title = \"Ostrell Valley riders' survey (invented demo study)\"\n\n\
         [source]\n\
         file = \"{responses}\"\n\
         id = \"respondent_id\"\n\
         time = \"submitted_at\"\n\
         # No weights: with design weights the anytime guarantee would become approximate.\n\n\
         [target]\n\
         margin = {MARGIN}\n\
         confidence = 0.95\n\
         # decide_by is left to its default, anytime: valid however often anyone looks.\n\
         deadline = \"{DEADLINE}\"\n\n\
         [log]\n\
         file = \"events.jsonl\"\n\n\
         [cells]\n\
         by = [\"zone\", \"age_band\"]\n"
    ));
    for m in &MEASURES {
        let list = |values: &[&str]| {
            values
                .iter()
                .map(|v| format!("\"{v}\""))
                .collect::<Vec<_>>()
                .join(", ")
        };
        s.push_str(&format!(
            "\n[[measure]]\nname = \"{}\"\ncolumn = \"{}\"\nyes = [{}]\nno = [{}]\n",
            m.name,
            m.column,
            list(m.yes),
            list(m.no)
        ));
    }
    for (z, zone) in ZONES.iter().enumerate() {
        for (a, age) in AGE_BANDS.iter().enumerate() {
            s.push_str(&format!(
                "\n[[quota]]\ncell = {{ zone = \"{zone}\", age_band = \"{age}\" }}\n"
            ));
            if let Some(m) = minimum(z, a) {
                s.push_str(&format!("minimum = {m}\n"));
            }
            if let Some(p) = population(z, a) {
                s.push_str(&format!("population = {p}\n"));
            }
        }
    }
    s
}

/// The note written beside the demo's files.
pub fn readme_text(seed: u64) -> String {
    format!(
        "INVENTED DATA — written by `closeout demo` (seed {seed}).\n\n\
         This folder holds a simulated survey: the Ostrell valley, its zones, the Ostrell\n\
         Valley Transport Trust and every response are made up. Times are simulated and\n\
         start at {START}.\n\n\
         study.toml     the study file (24 quota cells, three measures, target ±10 points at 95 %)\n\
         responses.csv  the responses, as the simulated exporter wrote them\n\
         events.jsonl   the event log closeout kept while following them\n\
         truth.csv      the true proportions the responses were drawn from\n\n\
         Try: closeout status study.toml --as-of <the last time in responses.csv>\n"
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_hourly_shares_sum_to_one_and_nights_are_quiet() {
        let total: f64 = HOURS.iter().sum();
        assert!((total - 1.0).abs() < 1e-12);
        assert_eq!(HOURS[3], 0.0);
        let t: Timestamp = "2026-03-02T03:00:00Z".parse().unwrap();
        assert_eq!(hourly_rate(0, 0, t), 0.0);
        // A Saturday noon brings the weekend share of a Monday noon.
        let mon: Timestamp = "2026-03-02T12:00:00Z".parse().unwrap();
        let sat: Timestamp = "2026-03-07T12:00:00Z".parse().unwrap();
        let ratio = hourly_rate(1, 1, sat) / hourly_rate(1, 1, mon);
        assert!((ratio - WEEKEND).abs() < 1e-12);
    }

    #[test]
    fn the_study_file_is_valid_and_has_24_cells() {
        let text = study_text(7, "responses.csv");
        let study = crate::study::Study::parse(&text, std::path::Path::new("/demo/study.toml"))
            .unwrap_or_else(|e| panic!("{e}\n{text}"));
        assert_eq!(study.quotas.len(), 24);
        assert_eq!(study.measures.len(), 3);
        assert_eq!(study.target.decide_by, crate::study::DEFAULT_METHOD);
        assert!(study.title.contains("invented"));
        assert!(text.contains("INVENTED"));
    }
}
