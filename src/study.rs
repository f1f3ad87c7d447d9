//! The study file: where the responses are, the cells, the measures and the target,
//! read from TOML and checked once into a [`Study`] that the rest of the program
//! trusts.
//!
//! Every problem is reported as a [`StudyError`] that names the file, the line and
//! column, and the key, quotes the bad value in single quotes and says what to give
//! instead. Unknown keys are errors, with the nearest known key suggested, so that a
//! typo is never silently ignored.
//!
//! The file is walked as a spanned TOML tree ([`toml::de::DeTable`]) rather than
//! through serde derive, so that each message can be written in the study's words and
//! point at the exact key or value.

use std::collections::HashMap;
use std::fmt::Write as _;
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::str::FromStr;

use toml::Spanned;
use toml::de::{DeTable, DeValue};

use crate::bounds::{self, Level, Method, SizeQuery, Split};
use crate::rows::{Layout, MeasureRule, normalise};

/// The method that decides "met" when the study does not say.
pub const DEFAULT_METHOD: Method = Method::Anytime;

/// The largest population a quota may give. No quota cell is larger than a billion
/// people, and the anytime size search with a population this large already takes a
/// noticeable fraction of a second; far above it the search slows to minutes.
pub const MAX_POPULATION: u64 = 1_000_000_000;

const TOP_KEYS: &[&str] = &[
    "title", "source", "target", "cells", "measure", "quota", "log",
];
const SOURCE_KEYS: &[&str] = &["file", "id", "time", "weight", "delimiter"];
const TARGET_KEYS: &[&str] = &[
    "margin",
    "confidence",
    "decide_by",
    "simultaneous",
    "deadline",
];
const CELLS_KEYS: &[&str] = &["by"];
const MEASURE_KEYS: &[&str] = &["name", "column", "yes", "no"];
const QUOTA_KEYS: &[&str] = &["cell", "minimum", "population"];
const LOG_KEYS: &[&str] = &["file"];

/// A checked study file.
#[derive(Clone, Debug, PartialEq)]
pub struct Study {
    pub title: String,
    /// The study file's path as it was given.
    pub study_path: PathBuf,
    pub source: Source,
    pub target: Target,
    /// `cells.by`: the columns whose values make up a cell, in order. Empty means one
    /// cell for the whole study.
    pub cells: Vec<String>,
    pub measures: Vec<Measure>,
    pub quotas: Vec<Quota>,
    /// The event log, resolved against the study file's folder.
    pub log: Option<PathBuf>,
    /// The anytime tuning size for a cell without a quota.
    tune_unplanned: u64,
    /// The level the tuning sizes were computed at.
    tuning_level: Level,
    /// Where each column the study names was written, for messages about the header.
    lines: ColumnLines,
}

/// Where the responses are.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Source {
    /// The CSV of responses, resolved against the study file's folder.
    pub file: PathBuf,
    pub id: Option<String>,
    pub time: Option<String>,
    pub weight: Option<String>,
    /// The field delimiter, one ASCII byte (`,` unless the study says otherwise).
    pub delimiter: u8,
}

/// The precision the study wants.
#[derive(Clone, Debug, PartialEq)]
pub struct Target {
    pub margin: f64,
    /// The study's stated confidence. With `simultaneous` each statement is made at
    /// [`Study::decision_level`] instead.
    pub level: Level,
    pub decide_by: Method,
    pub simultaneous: bool,
    pub deadline: Option<jiff::Timestamp>,
}

/// A key proportion: a column, the answers counted as yes and those counted as no, as
/// written in the study file (the layout holds them normalised).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Measure {
    pub name: String,
    pub column: String,
    pub yes: Vec<String>,
    pub no: Vec<String>,
}

/// A planned cell.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Quota {
    /// The cell's values in the order of [`Study::cells`], as written.
    pub cell: Vec<String>,
    pub minimum: Option<u64>,
    pub population: Option<u64>,
    /// The values normalised, for matching.
    key: Vec<String>,
    /// The anytime tuning size, fixed at parse time.
    tune: u64,
}

/// What kind of problem a [`StudyError`] is.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum StudyErrorKind {
    /// The file could not be read.
    Read,
    /// The text is not valid TOML.
    Syntax,
    /// A key the study file does not know (or a quota naming a column not in `cells.by`).
    UnknownKey,
    /// A value of the wrong type: text where a number belongs, and so on.
    WrongType,
    /// A required key or table is absent.
    Missing,
    /// A value of the right type that is not allowed.
    Invalid,
    /// Something given twice that must be given once.
    Duplicate,
    /// A column the study names is not in the CSV header.
    MissingColumn,
    /// A column the study names appears more than once in the CSV header.
    DuplicateColumn,
}

/// A problem with the study file, or with the CSV header against it.
///
/// Its `Display` is the whole message for the user:
/// `study.toml:7:14: target.confidence '1.5' is not between 0 and 1: give a level such as 0.95`.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("{}{}", location(.file, .line, .column), .message)]
pub struct StudyError {
    kind: StudyErrorKind,
    file: PathBuf,
    line: Option<usize>,
    column: Option<usize>,
    key: Option<String>,
    message: String,
}

fn location(file: &Path, line: &Option<usize>, column: &Option<usize>) -> String {
    match (line, column) {
        (Some(l), Some(c)) => format!("{}:{l}:{c}: ", file.display()),
        (Some(l), None) => format!("{}:{l}: ", file.display()),
        _ => format!("{}: ", file.display()),
    }
}

impl StudyError {
    pub fn kind(&self) -> StudyErrorKind {
        self.kind
    }
    /// The file the problem is in: the study file, or the CSV for header problems.
    pub fn file(&self) -> &Path {
        &self.file
    }
    /// 1-based line, when the problem is at a place in the file.
    pub fn line(&self) -> Option<usize> {
        self.line
    }
    /// 1-based column (in characters), when the problem is at a place in the file.
    pub fn column(&self) -> Option<usize> {
        self.column
    }
    /// The dotted key, such as `target.confidence`, when there is one.
    pub fn key(&self) -> Option<&str> {
        self.key.as_deref()
    }
    /// The message without the location.
    pub fn message(&self) -> &str {
        &self.message
    }
}

/// The study-file line of every column the study names.
#[derive(Clone, Debug, PartialEq, Eq, Default)]
struct ColumnLines {
    cells: Vec<Option<usize>>,
    measures: Vec<Option<usize>>,
    id: Option<usize>,
    time: Option<usize>,
    weight: Option<usize>,
}

impl Study {
    /// Read and check a study file. A missing or unreadable file is an error naming
    /// the path.
    pub fn load(path: &Path) -> Result<Study, StudyError> {
        let text = std::fs::read_to_string(path).map_err(|e| {
            let message = match e.kind() {
                std::io::ErrorKind::NotFound => {
                    "the study file is not there: check the path".to_string()
                }
                std::io::ErrorKind::InvalidData => {
                    "the study file is not UTF-8 text: save it as UTF-8".to_string()
                }
                _ => format!(
                    "the study file cannot be read ({e}): check the path and its permissions"
                ),
            };
            StudyError {
                kind: StudyErrorKind::Read,
                file: path.to_path_buf(),
                line: None,
                column: None,
                key: None,
                message,
            }
        })?;
        Study::parse(&text, path)
    }

    /// Check the text of a study file. `study_path` names the file in messages and is
    /// the folder relative paths are resolved against.
    pub fn parse(text: &str, study_path: &Path) -> Result<Study, StudyError> {
        // A byte-order mark (Windows editors write one) is not part of the TOML.
        let text = text.strip_prefix('\u{feff}').unwrap_or(text);
        let doc = Doc {
            text,
            path: study_path,
        };
        let root = DeTable::parse(text).map_err(|e| doc.syntax(&e))?;
        doc.study(root.get_ref())
    }

    /// Resolve every column the study names against a CSV header: exact names first,
    /// then names that agree after trimming and ignoring case, when only one does.
    pub fn layout(&self, header: &[&str]) -> Result<Layout, StudyError> {
        let lines = &self.lines;
        let find = |name: &str, role: &str, line: Option<usize>| {
            self.find_column(header, name, role, line)
        };
        let mut cells = Vec::with_capacity(self.cells.len());
        for (i, name) in self.cells.iter().enumerate() {
            let line = lines.cells.get(i).copied().flatten();
            cells.push(find(name, "cells.by", line)?);
        }
        let mut measures = Vec::with_capacity(self.measures.len());
        for (i, m) in self.measures.iter().enumerate() {
            let line = lines.measures.get(i).copied().flatten();
            let role = format!("measure '{}'", shown(&m.name));
            measures.push(MeasureRule {
                column: find(&m.column, &role, line)?,
                yes: normalised_list(&m.yes),
                no: normalised_list(&m.no),
            });
        }
        let optional = |name: &Option<String>, role: &str, line: Option<usize>| match name {
            Some(name) => find(name, role, line).map(Some),
            None => Ok(None),
        };
        Ok(Layout {
            width: header.len(),
            cells,
            measures,
            id: optional(&self.source.id, "source.id", lines.id)?,
            time: optional(&self.source.time, "source.time", lines.time)?,
            weight: optional(&self.source.weight, "source.weight", lines.weight)?,
        })
    }

    fn find_column(
        &self,
        header: &[&str],
        name: &str,
        role: &str,
        line: Option<usize>,
    ) -> Result<usize, StudyError> {
        let used_by = match line {
            Some(l) => format!("{role} in {}:{l}", self.study_path.display()),
            None => role.to_string(),
        };
        let fail = |kind, message| StudyError {
            kind,
            file: self.source.file.clone(),
            line: None,
            column: None,
            key: None,
            message,
        };
        let exact: Vec<usize> = (0..header.len()).filter(|&i| header[i] == name).collect();
        match exact.as_slice() {
            [i] => return Ok(*i),
            [] => {}
            many => {
                return Err(fail(
                    StudyErrorKind::DuplicateColumn,
                    format!(
                        "column '{}' ({used_by}) appears {} times in the header (fields {}): \
                         rename or remove the extra columns so that the name is used once",
                        shown(name),
                        many.len(),
                        field_numbers(many),
                    ),
                ));
            }
        }
        let wanted = normalise(name);
        let loose: Vec<usize> = (0..header.len())
            .filter(|&i| header_key(header[i]) == wanted)
            .collect();
        match loose.as_slice() {
            [i] => Ok(*i),
            [] => {
                let after = if header.is_empty() {
                    " (the header is empty): check source.file and source.delimiter".to_string()
                } else {
                    let suggestion = nearest(name, header.iter().map(|h| header_name(h)))
                        .map(|s| format!("; did you mean '{}'?", shown(s)))
                        .unwrap_or_else(|| ".".to_string());
                    format!("{suggestion} {}", header_list(header))
                };
                Err(fail(
                    StudyErrorKind::MissingColumn,
                    format!(
                        "column '{}' ({used_by}) is not in the header{after}",
                        shown(name)
                    ),
                ))
            }
            many => {
                let names: Vec<String> = many
                    .iter()
                    .map(|&i| format!("'{}' (field {})", shown(header[i]), i + 1))
                    .collect();
                Err(fail(
                    StudyErrorKind::DuplicateColumn,
                    format!(
                        "column '{}' ({used_by}) matches {} header names once case and spaces \
                         are ignored: {}; write the name exactly as one of them, or rename the others",
                        shown(name),
                        many.len(),
                        names.join(", "),
                    ),
                ))
            }
        }
    }

    /// The quota for a cell given as normalised values in the order of
    /// [`Study::cells`], if the study plans it.
    pub fn quota_for(&self, cell: &[String]) -> Option<&Quota> {
        // Normalised once, not again for every quota (`assess` asks this for every
        // observed cell: with 100 quotas that was 5,000 allocations a look).
        let normalised: Vec<String> = cell.iter().map(|c| normalise(c)).collect();
        self.quotas.iter().find(|q| {
            q.key.len() == cell.len()
                && q.key
                    .iter()
                    .zip(cell.iter().zip(&normalised))
                    .all(|(k, (c, n))| k == c || k == n)
        })
    }

    /// The planned size the anytime sequence is tuned for in a cell: the larger of the
    /// quota's minimum and the size the anytime method itself needs for the target
    /// margin in the worst case (with the quota's population, if any). Fixed from the
    /// study file alone, never from the data, and computed once when the file is read.
    /// `quota` is one of this study's quotas (from [`Study::quota_for`]); `None` is a
    /// cell without a quota.
    pub fn tune_for(&self, quota: Option<&Quota>) -> u64 {
        quota.map_or(self.tune_unplanned, |q| q.tune)
    }

    /// The level each statement "this measure in this cell is within the margin" is
    /// made at. Without `simultaneous` it is the study's level. With it, δ is shared
    /// (Bonferroni) over `planned_cells` × measures statements, so that all of them
    /// hold at once with the study's confidence; `planned_cells` is passed in because
    /// without quotas the cells are known only from the data (see
    /// [`Study::planned_cells`]). A count of 0 is taken as 1.
    pub fn decision_level(&self, planned_cells: usize) -> Level {
        if !self.target.simultaneous {
            return self.target.level;
        }
        let statements = (planned_cells.max(1) as u64).saturating_mul(self.measures.len() as u64);
        self.target.level.split(statements, Split::Bonferroni)
    }

    /// The number of planned cells when the study file alone fixes it: the quotas, or
    /// one cell when `cells.by` is empty; `None` when the cells come from the data.
    pub fn planned_cells(&self) -> Option<usize> {
        if !self.quotas.is_empty() {
            Some(self.quotas.len())
        } else if self.cells.is_empty() {
            Some(1)
        } else {
            None
        }
    }

    /// The level the anytime tuning sizes were computed at.
    ///
    /// Without `simultaneous` this is the study's level. With it, it is the decision
    /// level for the cells the study file fixes ([`Study::planned_cells`], or one cell
    /// when the cells come from the data). The tuning must not depend on the data, and
    /// any fixed tuning keeps the anytime guarantee — it only decides where the
    /// sequence is tightest — so when the number of cells is known only later the
    /// tuning is computed as if there were one, and the decision itself still uses the
    /// full correction from [`Study::decision_level`].
    pub fn tuning_level(&self) -> Level {
        self.tuning_level
    }
}

fn normalised_list(values: &[String]) -> Vec<String> {
    let mut out: Vec<String> = Vec::with_capacity(values.len());
    for v in values {
        let n = normalise(v);
        if !out.contains(&n) {
            out.push(n);
        }
    }
    out
}

/// A header name as compared: without a leading byte-order mark, trimmed, lower case.
fn header_key(h: &str) -> String {
    normalise(header_name(h))
}

fn header_name(h: &str) -> &str {
    h.trim_start_matches('\u{feff}')
}

fn field_numbers(fields: &[usize]) -> String {
    let numbers: Vec<String> = fields.iter().map(|i| (i + 1).to_string()).collect();
    numbers.join(", ")
}

/// "The header has: a, b, c" with at most 30 names.
fn header_list(header: &[&str]) -> String {
    const SHOWN: usize = 30;
    let names: Vec<String> = header
        .iter()
        .take(SHOWN)
        .map(|h| shown(header_name(h)))
        .collect();
    let mut out = format!("The header has: {}", names.join(", "));
    if header.len() > SHOWN {
        let _ = write!(out, ", … ({} more)", header.len() - SHOWN);
    }
    out
}

/// Text from a file made safe to print: control and bidirectional-formatting
/// characters escaped, and very long text shortened.
pub(crate) fn shown(s: &str) -> String {
    const LONGEST: usize = 80;
    let mut out = String::new();
    for (i, c) in s.chars().enumerate() {
        if i == LONGEST {
            out.push('…');
            break;
        }
        let format_char = matches!(c, '\u{200b}'..='\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}' | '\u{feff}');
        if c.is_control() || format_char {
            out.extend(c.escape_unicode());
        } else {
            out.push(c);
        }
    }
    out
}

/// Edit distance (Levenshtein) between two names, ignoring case.
pub(crate) fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.to_lowercase().chars().collect();
    let b: Vec<char> = b.to_lowercase().chars().collect();
    let mut previous: Vec<usize> = (0..=b.len()).collect();
    let mut current = vec![0; b.len() + 1];
    for (i, ca) in a.iter().enumerate() {
        current[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let substitute = previous[j] + usize::from(ca != cb);
            current[j + 1] = substitute.min(previous[j + 1] + 1).min(current[j] + 1);
        }
        std::mem::swap(&mut previous, &mut current);
    }
    previous[b.len()]
}

/// The candidate closest to `wanted` by edit distance, if it is close enough to be a
/// likely typo: at most a third of the name's length (at least 1). Ties go to the
/// first. Names longer than 200 characters are not compared.
pub(crate) fn nearest<'a>(
    wanted: &str,
    candidates: impl IntoIterator<Item = &'a str>,
) -> Option<&'a str> {
    const LONGEST: usize = 200;
    let wanted = wanted.trim();
    let length = wanted.chars().count();
    if length == 0 || length > LONGEST {
        return None;
    }
    let limit = (length / 3).max(1);
    let mut best: Option<(usize, &str)> = None;
    for c in candidates {
        if c.trim().is_empty() || c.chars().count() > LONGEST {
            continue;
        }
        let d = edit_distance(wanted, c.trim());
        if d <= limit && best.is_none_or(|(b, _)| d < b) {
            best = Some((d, c));
        }
    }
    best.map(|(_, c)| c)
}

type Value<'i> = Spanned<DeValue<'i>>;

/// The study file's text, for positions and messages.
struct Doc<'a> {
    text: &'a str,
    path: &'a Path,
}

impl Doc<'_> {
    /// 1-based line and column (in characters) of a byte offset.
    fn position(&self, offset: usize) -> (usize, usize) {
        let mut offset = offset.min(self.text.len());
        while offset > 0 && !self.text.is_char_boundary(offset) {
            offset -= 1;
        }
        let before = self.text.get(..offset).unwrap_or("");
        let line = before.matches('\n').count() + 1;
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        let column = before.get(line_start..).unwrap_or("").chars().count() + 1;
        (line, column)
    }

    fn line_of(&self, span: &Range<usize>) -> usize {
        self.position(span.start).0
    }

    fn error(
        &self,
        kind: StudyErrorKind,
        span: Option<&Range<usize>>,
        key: Option<String>,
        message: String,
    ) -> StudyError {
        let (line, column) = match span {
            Some(s) => {
                let (l, c) = self.position(s.start);
                (Some(l), Some(c))
            }
            None => (None, None),
        };
        StudyError {
            kind,
            file: self.path.to_path_buf(),
            line,
            column,
            key,
            message,
        }
    }

    /// The text of a value as written (its first line), made safe to print.
    fn written(&self, span: &Range<usize>) -> String {
        let raw = self.text.get(span.clone()).unwrap_or("");
        let first = raw.lines().next().unwrap_or("").trim();
        if first.len() < raw.trim().len() {
            format!("{}…", shown(first))
        } else {
            shown(first)
        }
    }

    fn syntax(&self, e: &toml::de::Error) -> StudyError {
        let span = e.span();
        let near = span
            .as_ref()
            .map(|s| {
                let (line, _) = self.position(s.start);
                let text = self.text.lines().nth(line - 1).unwrap_or("").trim();
                format!(" in '{}'", shown(text))
            })
            .unwrap_or_default();
        let what = e.message().trim();
        self.error(
            StudyErrorKind::Syntax,
            span.as_ref(),
            None,
            format!(
                "the study file is not valid TOML: {what}{near}: text values need \"double quotes\", \
                 tables [brackets], and each key may appear once in a table"
            ),
        )
    }

    fn study(&self, root: &DeTable<'_>) -> Result<Study, StudyError> {
        let top = Table {
            doc: self,
            name: String::new(),
            table: root,
            span: None,
        };
        check_every_key(&top)?;
        let title = top.required(
            top.string(
                "title",
                "a title in quotes such as \"Resident survey 2026\"",
            )?,
            "title",
            "title = \"Resident survey 2026\" at the top of the file",
        )?;
        if title.value.trim().is_empty() {
            return Err(top.invalid("title", &title.span, "is blank: give the study a title"));
        }
        let folder = self.path.parent().unwrap_or(Path::new(""));
        let mut lines = ColumnLines::default();

        let source_table = top.required(
            top.table("source")?,
            "source",
            "a [source] table with file = \"responses.csv\"",
        )?;
        let source = self.source(&source_table, folder, &mut lines)?;

        let target_table = top.required(
            top.table("target")?,
            "target",
            "a [target] table with margin = 0.05 and confidence = 0.95",
        )?;
        let target = self.target(&target_table)?;

        let cells = match top.table("cells")? {
            Some(t) => self.cells(&t, &mut lines)?,
            None => Vec::new(),
        };

        let measure_tables = top.tables("measure", "[[measure]] tables, one per measure")?;
        if measure_tables.is_empty() {
            return Err(self.error(
                StudyErrorKind::Missing,
                None,
                Some("measure".into()),
                "the study has no measure: add a [[measure]] table with name, column, yes and no"
                    .into(),
            ));
        }
        let mut measures = Vec::with_capacity(measure_tables.len());
        let mut measure_names: Vec<(String, usize)> = Vec::new();
        for t in &measure_tables {
            let (measure, line) = self.measure(t, &mut measure_names)?;
            measures.push(measure);
            lines.measures.push(Some(line));
        }

        let mut quotas = Vec::new();
        let mut quota_lines: Vec<(Vec<String>, usize)> = Vec::new();
        for t in &top.tables("quota", "[[quota]] tables, one per planned cell")? {
            quotas.push(self.quota(t, &cells, &mut quota_lines)?);
        }

        let log = match top.table("log")? {
            Some(t) => {
                t.check_keys(LOG_KEYS)?;
                match t.string("file", "a file name such as \"events.jsonl\"")? {
                    Some(f) if f.value.trim().is_empty() => {
                        return Err(t.invalid("file", &f.span, "is blank: give a file name such as \"events.jsonl\", or leave [log] out"));
                    }
                    Some(f) => Some(folder.join(f.value)),
                    None => None,
                }
            }
            None => None,
        };

        // Replaced by `tune` below, which also fixes the tuning sizes.
        let tuning_level = target.level;
        let mut study = Study {
            title: title.value,
            study_path: self.path.to_path_buf(),
            source,
            target,
            cells,
            measures,
            quotas,
            log,
            tune_unplanned: 1,
            tuning_level,
            lines,
        };
        self.tune(&mut study, &target_table, &quota_lines)?;
        Ok(study)
    }

    fn source(
        &self,
        t: &Table<'_, '_, '_>,
        folder: &Path,
        lines: &mut ColumnLines,
    ) -> Result<Source, StudyError> {
        t.check_keys(SOURCE_KEYS)?;
        let file = t.required(
            t.string("file", "a file name such as \"responses.csv\"")?,
            "file",
            "file = \"responses.csv\"",
        )?;
        if file.value.trim().is_empty() {
            return Err(t.invalid(
                "file",
                &file.span,
                "is blank: give the CSV of responses, such as \"responses.csv\"",
            ));
        }
        let column = |key: &str, slot: &mut Option<usize>| -> Result<Option<String>, StudyError> {
            match t.string(key, "a column name in quotes")? {
                Some(c) if c.value.trim().is_empty() => Err(t.invalid(
                    key,
                    &c.span,
                    "is blank: give the column's name as in the CSV header, or leave the key out",
                )),
                Some(c) => {
                    *slot = Some(self.line_of(&c.span));
                    Ok(Some(c.value))
                }
                None => Ok(None),
            }
        };
        let id = column("id", &mut lines.id)?;
        let time = column("time", &mut lines.time)?;
        let weight = column("weight", &mut lines.weight)?;
        let delimiter = match t.string(
            "delimiter",
            "one character in quotes such as \",\" or \";\"",
        )? {
            None => b',',
            Some(d) => {
                let mut chars = d.value.chars();
                match (chars.next(), chars.next()) {
                    (Some(c), None) if c.is_ascii() && !matches!(c, '"' | '\n' | '\r') => c as u8,
                    (Some(c), None) if c.is_ascii() => {
                        return Err(t.invalid("delimiter", &d.span, "cannot separate fields: give another character such as ',' or ';' (write \"\\t\" for a tab)"));
                    }
                    _ => {
                        return Err(t.invalid("delimiter", &d.span, "is not one ASCII character: give one character such as ',' or ';' (write \"\\t\" for a tab)"));
                    }
                }
            }
        };
        Ok(Source {
            file: folder.join(file.value),
            id,
            time,
            weight,
            delimiter,
        })
    }

    fn target(&self, t: &Table<'_, '_, '_>) -> Result<Target, StudyError> {
        t.check_keys(TARGET_KEYS)?;
        let margin = t.required(
            t.number("margin", "a proportion such as 0.05 for ±5 points")?,
            "margin",
            "margin = 0.05",
        )?;
        if !(margin.value > 0.0 && margin.value < 1.0) {
            return Err(t.invalid(
                "margin",
                &margin.span,
                "is not between 0 and 1: give a proportion such as 0.05 for ±5 points",
            ));
        }
        let confidence = t.required(
            t.number("confidence", "a level such as 0.95")?,
            "confidence",
            "confidence = 0.95",
        )?;
        let level = Level::from_confidence(confidence.value).map_err(|_| {
            t.invalid(
                "confidence",
                &confidence.span,
                "is not between 0 and 1: give a level such as 0.95",
            )
        })?;
        let decide_by =
            match t.string("decide_by", "a method name in quotes such as \"anytime\"")? {
                None => DEFAULT_METHOD,
                Some(m) => Method::from_str(&m.value).map_err(|_| {
                    let hint = nearest(&m.value, Method::ALL.iter().map(|m| m.name()))
                        .map(|s| format!("did you mean '{s}'? "))
                        .unwrap_or_default();
                    t.invalid(
                        "decide_by",
                        &m.span,
                        &format!(
                            "is not a method: {hint}{} one of {}",
                            if hint.is_empty() { "give" } else { "Give" },
                            bounds::method_names()
                        ),
                    )
                })?,
            };
        let simultaneous = match t.get("simultaneous") {
            None => false,
            Some(v) => match v.get_ref() {
                DeValue::Boolean(b) => *b,
                _ => return Err(t.wrong_type("simultaneous", v, "true or false")),
            },
        };
        let deadline = match t.get("deadline") {
            None => None,
            Some(v) => {
                let text = match v.get_ref() {
                    DeValue::String(s) => s.to_string(),
                    DeValue::Datetime(d) => d.to_string(),
                    _ => {
                        return Err(t.wrong_type(
                            "deadline",
                            v,
                            "a date and time such as \"2026-12-20T18:00:00Z\"",
                        ));
                    }
                };
                match jiff::Timestamp::from_str(text.trim()) {
                    Ok(ts) => Some(ts),
                    Err(_) => {
                        let span = v.span();
                        return Err(self.error(
                            StudyErrorKind::Invalid,
                            Some(&span),
                            Some(t.path("deadline")),
                            format!(
                                "{} '{}' is not a date and time with an offset: give it in RFC 3339 \
                                 form such as \"2026-12-20T18:00:00Z\" (Z for UTC) or \"2026-12-20T18:00:00+01:00\"",
                                t.path("deadline"),
                                shown(&text),
                            ),
                        ));
                    }
                }
            }
        };
        Ok(Target {
            margin: margin.value,
            level,
            decide_by,
            simultaneous,
            deadline,
        })
    }

    fn cells(
        &self,
        t: &Table<'_, '_, '_>,
        lines: &mut ColumnLines,
    ) -> Result<Vec<String>, StudyError> {
        t.check_keys(CELLS_KEYS)?;
        let by = t.required(
            t.strings(
                "by",
                "a list of column names such as [\"region\", \"age_band\"], or [] for one cell",
                false,
            )?,
            "by",
            "by = [\"region\", \"age_band\"] (or by = [] for one cell)",
        )?;
        let mut out: Vec<String> = Vec::with_capacity(by.value.len());
        for c in &by.value {
            if c.value.trim().is_empty() {
                return Err(t.invalid_item(
                    "by",
                    &c.span,
                    &c.value,
                    "is blank: give the column's name as in the CSV header",
                ));
            }
            if let Some(j) = out.iter().position(|o| normalise(o) == normalise(&c.value)) {
                let first = by.value.get(j).map_or(0, |f| self.line_of(&f.span));
                return Err(self.error(
                    StudyErrorKind::Duplicate,
                    Some(&c.span),
                    Some(t.path("by")),
                    format!(
                        "{} '{}' is listed twice (as '{}' on line {first}; names are compared without case): list each column once",
                        t.path("by"),
                        shown(&c.value),
                        shown(&out[j]),
                    ),
                ));
            }
            out.push(c.value.clone());
            lines.cells.push(Some(self.line_of(&c.span)));
        }
        Ok(out)
    }

    fn measure(
        &self,
        t: &Table<'_, '_, '_>,
        names: &mut Vec<(String, usize)>,
    ) -> Result<(Measure, usize), StudyError> {
        t.check_keys(MEASURE_KEYS)?;
        let name = t.required(
            t.string("name", "a name in quotes such as \"satisfied\"")?,
            "name",
            "name = \"satisfied\"",
        )?;
        if name.value.trim().is_empty() {
            return Err(t.invalid(
                "name",
                &name.span,
                "is blank: give the measure a name such as \"satisfied\"",
            ));
        }
        let line = self.line_of(&name.span);
        if let Some((_, first)) = names
            .iter()
            .find(|(n, _)| normalise(n) == normalise(&name.value))
        {
            return Err(self.error(
                StudyErrorKind::Duplicate,
                Some(&name.span),
                Some(t.path("name")),
                format!(
                    "{} '{}' is already the name of the measure on line {first} (names are compared without case): give each measure its own name",
                    t.path("name"),
                    shown(&name.value),
                ),
            ));
        }
        names.push((name.value.clone(), line));
        let column = t.required(
            t.string("column", "a column name in quotes such as \"q1\"")?,
            "column",
            "column = \"q1\"",
        )?;
        if column.value.trim().is_empty() {
            return Err(t.invalid(
                "column",
                &column.span,
                "is blank: give the column's name as in the CSV header",
            ));
        }
        let column_line = self.line_of(&column.span);
        let answers = |key: &str| -> Result<Found<Vec<Item>>, StudyError> {
            let list = t.required(
                t.strings(key, "a list of answers such as [\"4\", \"5\"]", true)?,
                key,
                &format!("{key} = [\"…\"], the answers counted as {key}"),
            )?;
            if list.value.is_empty() {
                return Err(t.invalid(
                    key,
                    &list.span,
                    &format!("is empty: list the answers counted as {key}, such as [\"4\", \"5\"]"),
                ));
            }
            for item in &list.value {
                if item.value.trim().is_empty() {
                    return Err(t.invalid_item(key, &item.span, &item.value, "is blank: blank answers always count as missing; list only answers with text"));
                }
            }
            Ok(list)
        };
        let yes = answers("yes")?;
        let no = answers("no")?;
        for item in &no.value {
            if let Some(y) = yes
                .value
                .iter()
                .find(|y| normalise(&y.value) == normalise(&item.value))
            {
                return Err(self.error(
                    StudyErrorKind::Invalid,
                    Some(&item.span),
                    Some(t.path("no")),
                    format!(
                        "{} '{}' is also in yes (as '{}' on line {}; answers are compared without case and surrounding spaces) for measure '{}': list each answer in yes or in no, not both",
                        t.path("no"),
                        shown(&item.value),
                        shown(&y.value),
                        self.line_of(&y.span),
                        shown(&name.value),
                    ),
                ));
            }
        }
        let values = |list: Found<Vec<Item>>| list.value.into_iter().map(|i| i.value).collect();
        Ok((
            Measure {
                name: name.value,
                column: column.value,
                yes: values(yes),
                no: values(no),
            },
            column_line,
        ))
    }

    fn quota(
        &self,
        t: &Table<'_, '_, '_>,
        cells: &[String],
        seen: &mut Vec<(Vec<String>, usize)>,
    ) -> Result<Quota, StudyError> {
        t.check_keys(QUOTA_KEYS)?;
        let columns = if cells.is_empty() {
            "(none: cells.by is empty, so the quota is for the whole study)".to_string()
        } else {
            cells.join(", ")
        };
        let cell_table = t.table("cell")?;
        let mut values: Vec<Option<Item>> = vec![None; cells.len()];
        let place: Range<usize>;
        match &cell_table {
            None if cells.is_empty() => {
                place = t.span.clone().unwrap_or(0..0);
            }
            None => {
                return Err(t.missing(
                    "cell",
                    &format!(
                        "cell = {{ {} }}, one value for each column of cells.by",
                        example_cell(cells)
                    ),
                ));
            }
            Some(c) => {
                place = c.span.clone().unwrap_or(0..0);
                for (k, v) in c.table.iter() {
                    let key = k.get_ref().as_ref();
                    let exact = cells.iter().position(|col| col == key);
                    let index = exact.or_else(|| {
                        cells
                            .iter()
                            .position(|col| normalise(col) == normalise(key))
                    });
                    let Some(index) = index else {
                        let hint = nearest(key, cells.iter().map(String::as_str))
                            .map(|s| format!("did you mean '{}'? ", shown(s)))
                            .unwrap_or_default();
                        let span = k.span();
                        return Err(self.error(
                            StudyErrorKind::UnknownKey,
                            Some(&span),
                            Some(c.path(key)),
                            format!(
                                "{} names '{}', which is not a column of cells.by: {hint}{} quota's cell gives one value for each of {columns}",
                                t.path("cell"),
                                shown(key),
                                if hint.is_empty() { "a" } else { "A" },
                            ),
                        ));
                    };
                    let item = c.item(key, v, true)?;
                    if item.value.trim().is_empty() {
                        return Err(c.invalid_item(
                            key,
                            &item.span,
                            &item.value,
                            "is blank: give the value as it appears in the column",
                        ));
                    }
                    if values[index].is_some() {
                        let span = k.span();
                        return Err(self.error(
                            StudyErrorKind::Duplicate,
                            Some(&span),
                            Some(c.path(key)),
                            format!("{} gives column '{}' twice: give one value for each column of cells.by", t.path("cell"), shown(&cells[index])),
                        ));
                    }
                    values[index] = Some(item);
                }
                if let Some(i) = values.iter().position(Option::is_none) {
                    return Err(self.error(
                        StudyErrorKind::Missing,
                        Some(&place),
                        Some(t.path("cell")),
                        format!(
                            "{} has no value for column '{}': give one value for each of {columns}",
                            t.path("cell"),
                            shown(&cells[i]),
                        ),
                    ));
                }
            }
        }
        let cell: Vec<String> = values.into_iter().flatten().map(|i| i.value).collect();
        let key: Vec<String> = cell.iter().map(|v| normalise(v)).collect();
        let line = self.line_of(&place);
        if let Some((_, first)) = seen.iter().find(|(k, _)| *k == key) {
            let described: Vec<String> = cells
                .iter()
                .zip(&cell)
                .map(|(c, v)| format!("{} = \"{}\"", shown(c), shown(v)))
                .collect();
            return Err(self.error(
                StudyErrorKind::Duplicate,
                Some(&place),
                Some(t.path("cell")),
                format!(
                    "{} '{}' is the same cell as the quota on line {first} (values are compared without case and surrounding spaces): keep one quota per cell",
                    t.path("cell"),
                    described.join(", "),
                ),
            ));
        }
        seen.push((key.clone(), line));
        let minimum = t.count("minimum", "a count of responses such as 150")?;
        let population = t.count(
            "population",
            "the number of people in the cell, such as 12000",
        )?;
        if let Some(p) = &population
            && p.value > MAX_POPULATION
        {
            return Err(t.invalid(
                "population",
                &p.span,
                "is more than 1,000,000,000: give the number of people in the cell",
            ));
        }
        if let (Some(m), Some(p)) = (&minimum, &population)
            && p.value < m.value
        {
            return Err(t.invalid(
                "population",
                &p.span,
                &format!("is smaller than the minimum '{}': a cell cannot give more responses than it has people; check both numbers", m.value),
            ));
        }
        Ok(Quota {
            cell,
            minimum: minimum.map(|m| m.value),
            population: population.map(|p| p.value),
            key,
            tune: 1,
        })
    }

    /// Fix every cell's anytime tuning size from the study alone (see
    /// [`Study::tuning_level`] for the level it is computed at).
    fn tune(
        &self,
        study: &mut Study,
        target: &Table<'_, '_, '_>,
        quota_lines: &[(Vec<String>, usize)],
    ) -> Result<(), StudyError> {
        let cells_for_tuning = study.planned_cells().unwrap_or(1);
        let level = study.decision_level(cells_for_tuning);
        study.tuning_level = level;
        let margin = study.target.margin;
        let margin_span = target.get("margin").map(|v| v.span());
        let query = SizeQuery::new(margin, level).map_err(|e| {
            self.error(
                StudyErrorKind::Invalid,
                margin_span.as_ref(),
                Some("target.margin".into()),
                format!("target.margin: {e}"),
            )
        })?;
        // Each distinct population's size once. They are independent searches (the
        // demo study's five took about 0.1 s one after another), so they run side by
        // side: the answers do not depend on which thread finds them, and the first
        // problem in file order is the one reported, as if they had run in turn.
        let mut populations: Vec<Option<u64>> = vec![None];
        for q in &study.quotas {
            if !populations.contains(&q.population) {
                populations.push(q.population);
            }
        }
        let found = crate::parallel::map_costliest_first(
            &populations,
            1,
            |_| 0,
            |&population| {
                let q = match population {
                    Some(p) => query.with_population(p),
                    None => Ok(query),
                };
                q.map_err(|e| e.to_string()).and_then(|q| {
                    bounds::required_size(Method::Anytime, &q)
                        .map(|r| r.n)
                        .map_err(|u| u.reason.to_string())
                })
            },
        );
        let sizes: HashMap<Option<u64>, Result<u64, String>> =
            populations.iter().copied().zip(found).collect();
        let size = |population: Option<u64>, line: Option<usize>| -> Result<u64, StudyError> {
            match sizes.get(&population) {
                Some(Ok(n)) => Ok(*n),
                Some(Err(reason)) => {
                    let line_note = line
                        .map(|l| format!(" (for the quota on line {l})"))
                        .unwrap_or_default();
                    Err(self.error(
                        StudyErrorKind::Invalid,
                        margin_span.as_ref(),
                        Some("target.margin".into()),
                        format!(
                            "target.margin '{}' is out of reach for the anytime sequence{line_note} ({reason}): give a wider margin such as 0.01",
                            shown(&margin.to_string()),
                        ),
                    ))
                }
                // Unreachable: every population was searched above.
                None => Err(self.error(
                    StudyErrorKind::Invalid,
                    margin_span.as_ref(),
                    Some("target.margin".into()),
                    "target.margin: the anytime sequence's size was not found".into(),
                )),
            }
        };
        study.tune_unplanned = size(None, None)?;
        for (i, q) in study.quotas.iter_mut().enumerate() {
            let line = quota_lines.get(i).map(|(_, l)| *l);
            let own = size(q.population, line)?;
            q.tune = own.max(q.minimum.unwrap_or(0)).max(1);
        }
        Ok(())
    }
}

/// Unknown keys come before every other problem, wherever they are: a misspelt or
/// misplaced key often shows up as a missing one elsewhere, and the unknown key is
/// the real mistake. The first in file order is reported. Tables of the wrong type are
/// left for the main pass to report.
fn check_every_key<'d, 't, 'i>(top: &Table<'d, 't, 'i>) -> Result<(), StudyError> {
    type Known = &'static [&'static str];
    let mut found: Vec<(Range<usize>, Table<'d, 't, 'i>, Known)> = Vec::new();
    let mut consider = |t: Table<'d, 't, 'i>, known: Known| {
        if let Some(span) = t.first_unknown(known) {
            found.push((span, t, known));
        }
    };
    consider(top.shallow(), TOP_KEYS);
    for (key, known) in [
        ("source", SOURCE_KEYS),
        ("target", TARGET_KEYS),
        ("cells", CELLS_KEYS),
        ("log", LOG_KEYS),
    ] {
        if let Ok(Some(t)) = top.table(key) {
            consider(t, known);
        }
    }
    for (key, known) in [("measure", MEASURE_KEYS), ("quota", QUOTA_KEYS)] {
        for t in top.tables(key, "").unwrap_or_default() {
            consider(t, known);
        }
    }
    match found.into_iter().min_by_key(|(span, _, _)| span.start) {
        Some((span, t, known)) => Err(t.unknown_key(&span, known)),
        None => Ok(()),
    }
}

fn example_cell(cells: &[String]) -> String {
    let parts: Vec<String> = cells
        .iter()
        .map(|c| format!("{} = \"…\"", shown(c)))
        .collect();
    parts.join(", ")
}

/// One string from a list, with where it was written.
#[derive(Clone, Debug)]
struct Item {
    value: String,
    span: Range<usize>,
}

/// A number, string or count with where it was written.
struct Found<T> {
    value: T,
    span: Range<usize>,
}

/// One table of the study file, with its dotted name for messages.
struct Table<'d, 't, 'i> {
    doc: &'d Doc<'d>,
    /// "" for the top level, else the dotted name such as "target" or "quota.cell".
    name: String,
    table: &'t DeTable<'i>,
    /// The header (or inline table) it was written at, if any.
    span: Option<Range<usize>>,
}

impl<'d, 't, 'i> Table<'d, 't, 'i> {
    fn shallow(&self) -> Table<'d, 't, 'i> {
        Table {
            doc: self.doc,
            name: self.name.clone(),
            table: self.table,
            span: self.span.clone(),
        }
    }

    fn path(&self, key: &str) -> String {
        if self.name.is_empty() {
            key.to_string()
        } else {
            format!("{}.{key}", self.name)
        }
    }

    fn header(&self) -> String {
        if self.name.is_empty() {
            "the top level".to_string()
        } else {
            format!("[{}]", self.name)
        }
    }

    fn get(&self, key: &str) -> Option<&'t Value<'i>> {
        self.table.get(key)
    }

    /// The first key (in file order) of this table that is not in `known`.
    fn first_unknown(&self, known: &[&str]) -> Option<Range<usize>> {
        self.table
            .iter()
            .map(|(k, _)| k)
            .filter(|k| !known.contains(&k.get_ref().as_ref()))
            .map(|k| k.span())
            .min_by_key(|span| span.start)
    }

    /// Every key must be known; the first unknown one (in file order) is reported,
    /// with the nearest known key when there is a close one.
    fn check_keys(&self, known: &[&str]) -> Result<(), StudyError> {
        match self.first_unknown(known) {
            Some(span) => Err(self.unknown_key(&span, known)),
            None => Ok(()),
        }
    }

    fn unknown_key(&self, span: &Range<usize>, known: &[&str]) -> StudyError {
        let key = self
            .table
            .iter()
            .map(|(k, _)| k)
            .find(|k| k.span() == *span)
            .map_or(String::new(), |k| k.get_ref().to_string());
        let path = self.path(&key);
        let hint = if let Some(s) = nearest(&key, known.iter().copied()) {
            format!("did you mean '{s}'? ")
        } else if !self.name.is_empty() && key == "title" {
            "'title' belongs at the top of the file, above the first [table]. ".to_string()
        } else if !self.name.is_empty() && TOP_KEYS.contains(&key.as_str()) {
            format!("'{key}' is a table of its own: write [{key}] on a line of its own. ")
        } else {
            String::new()
        };
        self.doc.error(
            StudyErrorKind::UnknownKey,
            Some(span),
            Some(path.clone()),
            format!(
                "unknown key '{}': {hint}The keys of {} are: {}",
                shown(&path),
                self.header(),
                known.join(", "),
            ),
        )
    }

    fn required<T>(&self, found: Option<T>, key: &str, example: &str) -> Result<T, StudyError> {
        found.ok_or_else(|| self.missing(key, example))
    }

    fn missing(&self, key: &str, example: &str) -> StudyError {
        let (what, place) = if self.name.is_empty() {
            (format!("'{key}'"), "to the study file".to_string())
        } else {
            (
                format!("{} has no '{key}'", self.header()),
                format!("under {}", self.header()),
            )
        };
        let message = if self.name.is_empty() {
            format!("the study file has no {what}: add {example}")
        } else {
            format!("{what}: add {example} {place}")
        };
        self.doc.error(
            StudyErrorKind::Missing,
            self.span.as_ref(),
            Some(self.path(key)),
            message,
        )
    }

    fn invalid(&self, key: &str, span: &Range<usize>, problem: &str) -> StudyError {
        let value = self.doc.written_value(span);
        self.doc.error(
            StudyErrorKind::Invalid,
            Some(span),
            Some(self.path(key)),
            format!("{} '{}' {problem}", self.path(key), value),
        )
    }

    fn invalid_item(
        &self,
        key: &str,
        span: &Range<usize>,
        value: &str,
        problem: &str,
    ) -> StudyError {
        self.doc.error(
            StudyErrorKind::Invalid,
            Some(span),
            Some(self.path(key)),
            format!("{} '{}' {problem}", self.path(key), shown(value)),
        )
    }

    fn wrong_type(&self, key: &str, v: &Value<'_>, expected: &str) -> StudyError {
        let span = v.span();
        self.doc.error(
            StudyErrorKind::WrongType,
            Some(&span),
            Some(self.path(key)),
            format!(
                "{} '{}' is {}: give {expected}",
                self.path(key),
                self.doc.written(&span),
                type_phrase(v.get_ref()),
            ),
        )
    }

    fn string(&self, key: &str, expected: &str) -> Result<Option<Found<String>>, StudyError> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        match v.get_ref() {
            DeValue::String(s) => Ok(Some(Found {
                value: s.to_string(),
                span: v.span(),
            })),
            _ => Err(self.wrong_type(key, v, expected)),
        }
    }

    fn number(&self, key: &str, expected: &str) -> Result<Option<Found<f64>>, StudyError> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        let value = match v.get_ref() {
            DeValue::Float(f) => f.as_str().parse::<f64>().ok(),
            DeValue::Integer(i) => i64::from_str_radix(i.as_str(), i.radix())
                .ok()
                .map(|i| i as f64),
            _ => return Err(self.wrong_type(key, v, expected)),
        };
        match value {
            Some(value) => Ok(Some(Found {
                value,
                span: v.span(),
            })),
            None => Err(self.wrong_type(key, v, expected)),
        }
    }

    /// A whole number of at least 1.
    fn count(&self, key: &str, expected: &str) -> Result<Option<Found<u64>>, StudyError> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        let span = v.span();
        match v.get_ref() {
            DeValue::Integer(i) => match i128::from_str_radix(i.as_str(), i.radix()) {
                Ok(n) if n >= 1 && n <= i128::from(u64::MAX) => Ok(Some(Found {
                    value: n as u64,
                    span,
                })),
                Ok(n) if n < 1 => Err(self.invalid(
                    key,
                    &span,
                    &format!("is not at least 1: give {expected}, or leave {key} out"),
                )),
                _ => Err(self.invalid(key, &span, &format!("is too large: give {expected}"))),
            },
            _ => Err(self.wrong_type(key, v, &format!("a whole number ({expected})"))),
        }
    }

    fn strings(
        &self,
        key: &str,
        expected: &str,
        numbers: bool,
    ) -> Result<Option<Found<Vec<Item>>>, StudyError> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        let DeValue::Array(items) = v.get_ref() else {
            return Err(self.wrong_type(key, v, expected));
        };
        let mut out = Vec::with_capacity(items.len());
        for item in items.iter() {
            out.push(self.item(key, item, numbers)?);
        }
        Ok(Some(Found {
            value: out,
            span: v.span(),
        }))
    }

    /// One text value (or a whole number in decimal, taken as its digits, when
    /// `numbers`): answers and cell values are compared as text.
    fn item(&self, key: &str, v: &Value<'_>, numbers: bool) -> Result<Item, StudyError> {
        let span = v.span();
        match v.get_ref() {
            DeValue::String(s) => Ok(Item {
                value: s.to_string(),
                span,
            }),
            DeValue::Integer(i) if numbers && i.radix() == 10 => Ok(Item {
                value: i.as_str().to_string(),
                span,
            }),
            other => {
                let phrase = type_phrase(other);
                Err(self.doc.error(
                    StudyErrorKind::WrongType,
                    Some(&span),
                    Some(self.path(key)),
                    format!(
                        "{} '{}' is {phrase}: give text in quotes, as the value appears in the CSV, such as \"4\"",
                        self.path(key),
                        self.doc.written(&span),
                    ),
                ))
            }
        }
    }

    fn table(&self, key: &str) -> Result<Option<Table<'d, 't, 'i>>, StudyError> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        match v.get_ref() {
            DeValue::Table(t) => Ok(Some(Table {
                doc: self.doc,
                name: self.path(key),
                table: t,
                span: Some(v.span()),
            })),
            _ => Err(self.wrong_type(
                key,
                v,
                &format!(
                    "a table: write [{}] on a line of its own with its keys below",
                    self.path(key)
                ),
            )),
        }
    }

    fn not_tables(&self, key: &str, v: &Value<'_>, expected: &str) -> StudyError {
        match v.get_ref() {
            DeValue::Table(_) => {
                let span = v.span();
                self.doc.error(
                    StudyErrorKind::WrongType,
                    Some(&span),
                    Some(self.path(key)),
                    format!(
                        "{} '{}' is a single table: write [[{key}]] with double brackets, one for each {key}",
                        self.path(key),
                        self.doc.written(&span),
                    ),
                )
            }
            _ => self.wrong_type(key, v, expected),
        }
    }

    /// An array of tables (`[[measure]]`).
    fn tables(&self, key: &str, expected: &str) -> Result<Vec<Table<'d, 't, 'i>>, StudyError> {
        let Some(v) = self.get(key) else {
            return Ok(Vec::new());
        };
        let DeValue::Array(items) = v.get_ref() else {
            return Err(self.not_tables(key, v, expected));
        };
        let mut out = Vec::with_capacity(items.len());
        for item in items.iter() {
            match item.get_ref() {
                DeValue::Table(t) => out.push(Table {
                    doc: self.doc,
                    name: self.path(key),
                    table: t,
                    span: Some(item.span()),
                }),
                _ => return Err(self.not_tables(key, item, expected)),
            }
        }
        Ok(out)
    }
}

impl Doc<'_> {
    /// A value as written, for messages about its content: a string's own text
    /// (without quotes), anything else as in the file.
    fn written_value(&self, span: &Range<usize>) -> String {
        let raw = self.text.get(span.clone()).unwrap_or("");
        match DeValue::parse(raw).map(Spanned::into_inner) {
            Ok(DeValue::String(s)) => shown(&s),
            _ => self.written(span),
        }
    }
}

fn type_phrase(v: &DeValue<'_>) -> &'static str {
    match v {
        DeValue::String(_) => "text",
        DeValue::Integer(_) => "a whole number",
        DeValue::Float(_) => "a decimal number",
        DeValue::Boolean(_) => "a true/false value",
        DeValue::Datetime(_) => "a date or time",
        DeValue::Array(_) => "a list",
        DeValue::Table(_) => "a table",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const SMALL: &str = r#"
title = "t"
[source]
file = "r.csv"
[target]
margin = 0.05
confidence = 0.95
[[measure]]
name = "m"
column = "q1"
yes = ["y"]
no = ["n"]
"#;

    fn parse(text: &str) -> Result<Study, StudyError> {
        Study::parse(text, Path::new("s.toml"))
    }

    #[test]
    fn edit_distance_counts_insertions_deletions_and_substitutions_without_case() {
        assert_eq!(edit_distance("", ""), 0);
        assert_eq!(edit_distance("abc", ""), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("flaw", "lawn"), 2);
        assert_eq!(edit_distance("Age_Band", "age_band"), 0);
        assert_eq!(edit_distance("age_bnd", "age_band"), 1);
        assert_eq!(edit_distance("confidance", "confidence"), 1);
        // Characters, not bytes.
        assert_eq!(edit_distance("région", "region"), 1);
    }

    #[test]
    fn nearest_suggests_only_close_names() {
        let known = [
            "margin",
            "confidence",
            "decide_by",
            "simultaneous",
            "deadline",
        ];
        assert_eq!(nearest("confidance", known), Some("confidence"));
        assert_eq!(nearest("DECIDE-BY", known), Some("decide_by"));
        assert_eq!(nearest("colour", known), None);
        assert_eq!(nearest("", known), None);
        // Ties go to the first candidate.
        assert_eq!(nearest("q3", ["q1", "q2"]), Some("q1"));
    }

    #[test]
    fn shown_escapes_control_and_direction_characters_and_shortens() {
        assert_eq!(shown("plain"), "plain");
        assert_eq!(shown("a\u{1b}[31mb"), "a\\u{1b}[31mb");
        assert_eq!(shown("x\u{202e}y"), "x\\u{202e}y");
        assert_eq!(shown("tab\there"), "tab\\u{9}here");
        let long = "x".repeat(100);
        assert_eq!(shown(&long).chars().count(), 81);
        assert!(shown(&long).ends_with('…'));
    }

    #[test]
    fn positions_count_lines_and_characters_from_one() {
        let doc = Doc {
            text: "a = 1\nbé = 'x'\n",
            path: Path::new("s.toml"),
        };
        assert_eq!(doc.position(0), (1, 1));
        assert_eq!(doc.position(4), (1, 5));
        assert_eq!(doc.position(6), (2, 1));
        // After "bé" (the 'é' is two bytes): the third character of line 2.
        assert_eq!(doc.position(9), (2, 3));
        // Inside 'é' and past the end: no panic, the nearest place before.
        assert_eq!(doc.position(8), (2, 2));
        assert_eq!(doc.position(1000), (3, 1));
    }

    #[test]
    fn defaults_when_optional_keys_are_left_out() {
        let s = parse(SMALL).unwrap();
        assert_eq!(s.source.delimiter, b',');
        assert_eq!(s.source.id, None);
        assert_eq!(s.target.decide_by, Method::Anytime);
        assert!(!s.target.simultaneous);
        assert_eq!(s.target.deadline, None);
        assert!(s.cells.is_empty());
        assert!(s.quotas.is_empty());
        assert_eq!(s.log, None);
        assert_eq!(s.planned_cells(), Some(1));
    }

    #[test]
    fn a_byte_order_mark_is_ignored() {
        let s = parse(&format!("\u{feff}{SMALL}")).unwrap();
        assert_eq!(s.title, "t");
    }

    #[test]
    fn whole_numbers_in_answer_lists_are_taken_as_their_digits() {
        let text = SMALL.replace(r#"yes = ["y"]"#, "yes = [4, 5]");
        let s = parse(&text).unwrap();
        assert_eq!(s.measures[0].yes, vec!["4", "5"]);
        let hex = SMALL.replace(r#"yes = ["y"]"#, "yes = [0x4]");
        assert_eq!(parse(&hex).unwrap_err().kind(), StudyErrorKind::WrongType);
    }

    #[test]
    fn a_tab_delimiter_and_a_toml_date_time_deadline_are_accepted() {
        let text = SMALL
            .replace("file = \"r.csv\"", "file = \"r.csv\"\ndelimiter = \"\\t\"")
            .replace(
                "confidence = 0.95",
                "confidence = 0.95\ndeadline = 2026-12-20T18:00:00+01:00",
            );
        let s = parse(&text).unwrap();
        assert_eq!(s.source.delimiter, b'\t');
        assert_eq!(
            s.target.deadline,
            Some("2026-12-20T17:00:00Z".parse().unwrap())
        );
    }

    #[test]
    fn the_quote_character_is_refused_as_a_delimiter() {
        let text = SMALL.replace("file = \"r.csv\"", "file = \"r.csv\"\ndelimiter = '\"'");
        let e = parse(&text).unwrap_err();
        assert_eq!(e.key(), Some("source.delimiter"));
        assert!(e.to_string().contains("cannot separate fields"), "{e}");
    }

    fn with_quotas(simultaneous: bool, quotas: usize, measures: usize) -> Study {
        let mut text = format!(
            "title = \"t\"\n[source]\nfile = \"r.csv\"\n[target]\nmargin = 0.05\n\
             confidence = 0.95\nsimultaneous = {simultaneous}\n[cells]\nby = [\"region\"]\n"
        );
        for m in 0..measures {
            text.push_str(&format!(
                "[[measure]]\nname = \"m{m}\"\ncolumn = \"q{m}\"\nyes = [\"1\"]\nno = [\"0\"]\n"
            ));
        }
        for q in 0..quotas {
            text.push_str(&format!("[[quota]]\ncell = {{ region = \"r{q}\" }}\n"));
        }
        parse(&text).unwrap()
    }

    #[test]
    fn without_simultaneous_every_statement_is_made_at_the_study_level() {
        let s = with_quotas(false, 4, 3);
        assert_eq!(s.decision_level(4), s.target.level);
        assert_eq!(s.decision_level(100), s.target.level);
        assert_eq!(s.tuning_level(), s.target.level);
    }

    #[test]
    fn simultaneous_shares_delta_over_cells_times_measures() {
        let s = with_quotas(true, 4, 3);
        assert!((s.decision_level(4).delta() - 0.05 / 12.0).abs() < 1e-15);
        assert!((s.decision_level(10).delta() - 0.05 / 30.0).abs() < 1e-15);
        // No cells counts as one.
        assert!((s.decision_level(0).delta() - 0.05 / 3.0).abs() < 1e-15);
        // Tuned at the level for the quotas the study plans.
        assert_eq!(s.planned_cells(), Some(4));
        assert_eq!(s.tuning_level(), s.decision_level(4));
        let sq = SizeQuery::new(0.05, s.decision_level(4)).unwrap();
        let want = bounds::required_size(Method::Anytime, &sq).unwrap().n;
        assert_eq!(s.tune_for(s.quotas.first()), want);
    }

    #[test]
    fn simultaneous_without_quotas_tunes_as_for_one_cell() {
        let s = with_quotas(true, 0, 2);
        assert_eq!(s.planned_cells(), None);
        assert!((s.tuning_level().delta() - 0.05 / 2.0).abs() < 1e-15);
        let sq = SizeQuery::new(0.05, s.tuning_level()).unwrap();
        let want = bounds::required_size(Method::Anytime, &sq).unwrap().n;
        assert_eq!(s.tune_for(None), want);
    }

    #[test]
    fn quota_for_ignores_case_and_surrounding_space_and_needs_the_whole_cell() {
        let s = with_quotas(false, 3, 1);
        let found = s.quota_for(&["r1".to_string()]).unwrap();
        assert_eq!(found.cell, vec!["r1"]);
        assert_eq!(
            s.quota_for(&[" R2 ".to_string()]).map(|q| q.cell.clone()),
            Some(vec!["r2".to_string()])
        );
        assert!(s.quota_for(&["r9".to_string()]).is_none());
        assert!(s.quota_for(&[]).is_none());
        assert!(s.quota_for(&["r1".to_string(), "x".to_string()]).is_none());
    }

    #[test]
    fn a_whole_study_quota_needs_no_cell_when_cells_by_is_empty() {
        let s = parse(&format!("{SMALL}[[quota]]\nminimum = 40\n")).unwrap();
        assert_eq!(s.quotas.len(), 1);
        assert!(s.quotas[0].cell.is_empty());
        assert_eq!(s.quota_for(&[]).and_then(|q| q.minimum), Some(40));
        let twice = parse(&format!("{SMALL}[[quota]]\n[[quota]]\n")).unwrap_err();
        assert_eq!(twice.kind(), StudyErrorKind::Duplicate);
    }

    #[test]
    fn relative_paths_are_resolved_against_the_study_folder_and_absolute_ones_kept() {
        let s = Study::parse(
            &format!("{SMALL}[log]\nfile = \"ev.jsonl\"\n"),
            Path::new("fieldwork/autumn/s.toml"),
        )
        .unwrap();
        assert_eq!(s.source.file, Path::new("fieldwork/autumn/r.csv"));
        assert_eq!(
            s.log.as_deref(),
            Some(Path::new("fieldwork/autumn/ev.jsonl"))
        );
        let absolute = SMALL.replace("\"r.csv\"", "\"/data/r.csv\"");
        let s = Study::parse(&absolute, Path::new("fieldwork/s.toml")).unwrap();
        assert_eq!(s.source.file, Path::new("/data/r.csv"));
    }

    #[test]
    fn error_display_is_file_line_column_then_the_message() {
        let e = parse(&SMALL.replace("margin = 0.05", "margin = 0")).unwrap_err();
        assert_eq!(e.file(), Path::new("s.toml"));
        assert_eq!(e.line(), Some(6));
        assert_eq!(e.column(), Some(10));
        assert_eq!(e.key(), Some("target.margin"));
        assert_eq!(e.kind(), StudyErrorKind::Invalid);
        assert_eq!(e.to_string(), format!("s.toml:6:10: {}", e.message()));
    }
}
