//! Turning one CSV record into a response, or a rejection with its line and reason.
//! Knows nothing of files or statistics: it sees one record at a time.

/// Which column holds what, resolved once from the study and the CSV header.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Layout {
    /// Fields a record must have (the header's width).
    pub width: usize,
    /// The columns whose values make up the cell, in the study's `cells.by` order.
    pub cells: Vec<usize>,
    /// One rule per measure, in the study's order.
    pub measures: Vec<MeasureRule>,
    pub id: Option<usize>,
    pub time: Option<usize>,
    pub weight: Option<usize>,
}

/// How one measure reads its column.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MeasureRule {
    pub column: usize,
    /// Answers counted as yes, normalised with [`normalise`].
    pub yes: Vec<String>,
    /// Answers counted as no, normalised with [`normalise`].
    pub no: Vec<String>,
}

/// What one answer counts as.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Answer {
    Yes,
    No,
    /// Blank: not in the denominator.
    Missing,
    /// A value that is neither yes nor no: not in the denominator, reported.
    Unexpected,
}

/// The form in which answers and cell values are compared: surrounding white space
/// removed, letters lower-cased.
pub fn normalise(raw: &str) -> String {
    raw.trim().to_lowercase()
}

impl MeasureRule {
    /// Classify one raw answer (trimmed, case ignored).
    pub fn classify(&self, raw: &str) -> Answer {
        let trimmed = raw.trim();
        if trimmed.is_empty() {
            return Answer::Missing;
        }
        let matches = |list: &[String]| {
            list.iter()
                .any(|v| v.as_str() == trimmed || *v == trimmed.to_lowercase())
        };
        if matches(&self.yes) {
            Answer::Yes
        } else if matches(&self.no) {
            Answer::No
        } else {
            Answer::Unexpected
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn answers_are_matched_trimmed_and_without_case() {
        let rule = MeasureRule {
            column: 0,
            yes: vec!["4".into(), "yes".into()],
            no: vec!["1".into(), "no".into()],
        };
        assert_eq!(rule.classify(" 4 "), Answer::Yes);
        assert_eq!(rule.classify("YES"), Answer::Yes);
        assert_eq!(rule.classify("No"), Answer::No);
        assert_eq!(rule.classify("   "), Answer::Missing);
        assert_eq!(rule.classify("don't know"), Answer::Unexpected);
    }
}
