//! The dashboard's styles: a colour theme, and a monochrome one for `NO_COLOR` that
//! uses only bold, underline and reverse video, so that the selection and the
//! statuses stay visible without colour. Every status is also written as a word with
//! a symbol, so colour is never the only signal.

use ratatui::style::{Color, Modifier, Style};

use crate::assess::Status;

/// Every style the dashboard uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Theme {
    /// Whether colours are used at all.
    pub colour: bool,
    /// The top line.
    pub title: Style,
    /// Labels in front of values.
    pub label: Style,
    /// Text that matters less.
    pub faint: Style,
    /// A table's header row.
    pub heading: Style,
    /// The selected row.
    pub selected: Style,
    pub met: Style,
    pub open: Style,
    pub at_risk: Style,
    /// Cells outside the quotas.
    pub unplanned: Style,
    /// The verdict when every planned cell is met.
    pub ready: Style,
    /// The verdict while collecting.
    pub collecting: Style,
    /// The line that says a preview is on screen.
    pub preview: Style,
    /// Problems and warnings.
    pub warning: Style,
    /// A margin within the target.
    pub within: Style,
    /// The deciding method's row.
    pub deciding: Style,
    /// The filled part of a progress bar.
    pub bar: Style,
    /// Chart lines: the observed margin, the projection, and the target.
    pub observed: Style,
    pub projected: Style,
    pub target: Style,
    /// Box borders.
    pub border: Style,
}

impl Theme {
    /// The theme for the environment: monochrome when `NO_COLOR` is set to anything
    /// but the empty string (<https://no-color.org>).
    pub fn from_env() -> Theme {
        match std::env::var_os("NO_COLOR") {
            Some(v) if !v.is_empty() => Theme::mono(),
            _ => Theme::colour(),
        }
    }

    pub fn colour() -> Theme {
        let plain = Style::new();
        Theme {
            colour: true,
            title: Style::new()
                .fg(Color::Black)
                .bg(Color::LightCyan)
                .add_modifier(Modifier::BOLD),
            label: Style::new().fg(Color::Gray),
            faint: Style::new().fg(Color::DarkGray),
            heading: Style::new()
                .fg(Color::LightCyan)
                .add_modifier(Modifier::BOLD),
            selected: Style::new().add_modifier(Modifier::REVERSED),
            met: Style::new().fg(Color::LightGreen),
            open: Style::new().fg(Color::LightYellow),
            at_risk: Style::new()
                .fg(Color::LightRed)
                .add_modifier(Modifier::BOLD),
            unplanned: Style::new().fg(Color::DarkGray),
            ready: Style::new()
                .fg(Color::Black)
                .bg(Color::LightGreen)
                .add_modifier(Modifier::BOLD),
            collecting: Style::new()
                .fg(Color::Black)
                .bg(Color::LightYellow)
                .add_modifier(Modifier::BOLD),
            preview: Style::new()
                .fg(Color::Black)
                .bg(Color::LightMagenta)
                .add_modifier(Modifier::BOLD),
            warning: Style::new().fg(Color::LightRed),
            within: Style::new().fg(Color::LightGreen),
            deciding: Style::new().add_modifier(Modifier::BOLD),
            bar: Style::new().fg(Color::LightCyan),
            observed: Style::new().fg(Color::LightCyan),
            projected: Style::new().fg(Color::LightMagenta),
            target: Style::new().fg(Color::LightGreen),
            border: plain.fg(Color::DarkGray),
        }
    }

    pub fn mono() -> Theme {
        let plain = Style::new();
        let bold = Style::new().add_modifier(Modifier::BOLD);
        let reverse = Style::new().add_modifier(Modifier::REVERSED);
        Theme {
            colour: false,
            title: reverse.add_modifier(Modifier::BOLD),
            label: plain,
            faint: plain,
            heading: bold.add_modifier(Modifier::UNDERLINED),
            selected: reverse,
            met: plain,
            open: plain,
            at_risk: bold,
            unplanned: plain,
            ready: reverse.add_modifier(Modifier::BOLD),
            collecting: bold,
            preview: reverse,
            warning: bold,
            within: plain,
            deciding: bold,
            bar: plain,
            observed: plain,
            projected: plain,
            target: plain,
            border: plain,
        }
    }

    /// The style of a status.
    pub fn status(&self, status: Status) -> Style {
        match status {
            Status::Met => self.met,
            Status::Open => self.open,
            Status::AtRisk => self.at_risk,
        }
    }
}

/// A status as a symbol and a word, so that it reads without colour.
pub fn status_text(status: Status, planned: bool) -> &'static str {
    match (planned, status) {
        (false, _) => "unplanned",
        (true, Status::Met) => "✓ met",
        (true, Status::Open) => "○ open",
        (true, Status::AtRisk) => "▲ at risk",
    }
}

/// A status as one symbol, for narrow tables (with a legend nearby).
pub fn status_symbol(status: Status, planned: bool) -> &'static str {
    match (planned, status) {
        (false, _) => "–",
        (true, Status::Met) => "✓",
        (true, Status::Open) => "○",
        (true, Status::AtRisk) => "▲",
    }
}

/// What the symbols of [`status_symbol`] mean.
pub const STATUS_LEGEND: &str = "✓ met ○ open ▲ at risk – unplanned";
