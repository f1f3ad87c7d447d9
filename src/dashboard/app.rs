//! The dashboard's state and the one function that changes it, [`App::update`], one
//! event at a time (The Elm Architecture). No terminal here: keys arrive as key
//! events, and what the terminal or the reading thread should do comes back as
//! [`Effect`]s, so every key and every update is tested without a terminal.

use std::collections::VecDeque;

use jiff::Timestamp;
use jiff::tz::TimeZone;
use ratatui::crossterm::event::{KeyCode, KeyEvent, KeyEventKind, KeyModifiers};

use super::feed::{Command, NOTICES_KEPT, Notice, Update};
use super::theme::Theme;
use crate::assess::{CellView, Snapshot};
use crate::bounds::Method;

/// Something that happened: a key, a new size, an update from the reading thread, the
/// clock's tick, or a signal to stop (SIGTERM, SIGHUP).
#[derive(Clone, Debug)]
pub enum Event {
    Key(KeyEvent),
    Resize(u16, u16),
    Feed(Box<Update>),
    Tick(Timestamp),
    Stop,
}

/// What the caller should do after an update.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Effect {
    /// Send this to the reading thread.
    Tell(Command),
    /// Ring the terminal's bell once.
    Bell,
    /// Leave the dashboard.
    Quit,
}

/// The page on screen.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Page {
    /// Every cell in one table.
    Cells,
    /// The selected cell: every method side by side, the margin chart, arrivals.
    Cell,
    /// Rejected rows, duplicates, unexpected answers, unplanned cells, notices.
    Problems,
}

/// A box drawn over the page.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Overlay {
    /// The keys and the cautions.
    Help,
    /// Choose a method to preview the verdict under; `cursor` indexes [`Method::ALL`].
    Methods { cursor: usize },
}

/// The order of the cells table. Planned cells always come before unplanned ones.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SortKey {
    /// The verdict's own order: at risk, then open, then met, least progress first.
    Worst,
    Name,
    Responses,
    Needed,
    Eta,
    Margin,
}

impl SortKey {
    pub const ALL: [SortKey; 6] = [
        SortKey::Worst,
        SortKey::Name,
        SortKey::Responses,
        SortKey::Needed,
        SortKey::Eta,
        SortKey::Margin,
    ];

    /// How the table's title says it.
    pub fn describe(self) -> &'static str {
        match self {
            SortKey::Worst => "worst first",
            SortKey::Name => "by name",
            SortKey::Responses => "fewest responses first",
            SortKey::Needed => "most needed first",
            SortKey::Eta => "latest ETA first",
            SortKey::Margin => "widest margin first",
        }
    }

    fn next(self) -> SortKey {
        let i = SortKey::ALL.iter().position(|&k| k == self).unwrap_or(0);
        SortKey::ALL[(i + 1) % SortKey::ALL.len()]
    }
}

/// On the cell page of a small terminal, which half is shown.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CellPart {
    Methods,
    Trend,
}

/// How the dashboard starts.
#[derive(Clone, Debug)]
pub struct Settings {
    /// The time zone times are shown in.
    pub zone: TimeZone,
    pub theme: Theme,
    /// Whether the clock is simulated (said on screen).
    pub simulated: bool,
    /// The terminal's size.
    pub size: (u16, u16),
    /// The time at the start, by the dashboard's clock.
    pub now: Timestamp,
}

/// What the last frame found out about the layout, for the next key.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Drawn {
    /// The first cell row shown in the table.
    pub offset: usize,
    /// Cell rows that fit in the table.
    pub rows: usize,
    /// Lines that fit on the problems page, and its line count.
    pub problem_lines: usize,
    pub problem_total: usize,
}

/// The dashboard's whole state.
#[derive(Clone, Debug)]
pub struct App {
    pub(crate) feed: Option<Box<Update>>,
    pub(crate) notices: VecDeque<Notice>,
    pub(crate) page: Page,
    pub(crate) overlay: Option<Overlay>,
    pub(crate) selected: Option<String>,
    pub(crate) sort: SortKey,
    pub(crate) reversed: bool,
    pub(crate) measure: usize,
    pub(crate) cell_part: CellPart,
    pub(crate) problems_scroll: usize,
    /// The method asked to preview under (the feed's update says when it is there).
    pub(crate) preview: Option<Method>,
    pub(crate) size: (u16, u16),
    pub(crate) now: Timestamp,
    pub(crate) zone: TimeZone,
    pub(crate) theme: Theme,
    pub(crate) simulated: bool,
    /// Whether the study was ready to close at the last update after the first read.
    pub(crate) ready_seen: Option<bool>,
    /// When it became ready to close, by the verdict's clock.
    pub(crate) ready_since: Option<Timestamp>,
    pub(crate) drawn: Drawn,
    dirty: bool,
}

impl App {
    pub fn new(settings: Settings) -> App {
        App {
            feed: None,
            notices: VecDeque::new(),
            page: Page::Cells,
            overlay: None,
            selected: None,
            sort: SortKey::Worst,
            reversed: false,
            measure: 0,
            cell_part: CellPart::Methods,
            problems_scroll: 0,
            preview: None,
            size: settings.size,
            now: settings.now,
            zone: settings.zone,
            theme: settings.theme,
            simulated: settings.simulated,
            ready_seen: None,
            ready_since: None,
            drawn: Drawn::default(),
            dirty: true,
        }
    }

    /// The page on screen.
    pub fn page(&self) -> Page {
        self.page
    }

    /// The box drawn over the page, if any.
    pub fn overlay(&self) -> Option<Overlay> {
        self.overlay
    }

    /// The order of the cells table, and whether it is reversed.
    pub fn sort(&self) -> (SortKey, bool) {
        (self.sort, self.reversed)
    }

    /// The method the verdict is previewed under, when one was asked for.
    pub fn preview(&self) -> Option<Method> {
        self.preview
    }

    /// The selected cell's label.
    pub fn selected(&self) -> Option<&str> {
        self.selected.as_deref()
    }

    /// The measure shown on the cell page (an index into the cell's measures).
    pub fn measure(&self) -> usize {
        self.measure
    }

    /// Where the reading of the file stands, by the last update.
    pub fn feed_reading(&self) -> Option<&super::feed::Reading> {
        self.feed.as_deref().map(|u| &u.reading)
    }

    /// The notices kept, oldest first.
    pub fn notices(&self) -> impl Iterator<Item = &Notice> {
        self.notices.iter()
    }

    /// Whether something changed since the last frame; clears the flag.
    pub fn take_dirty(&mut self) -> bool {
        std::mem::take(&mut self.dirty)
    }

    /// Record what the frame just drawn found out about the layout.
    pub fn after_draw(&mut self, drawn: Drawn) {
        self.drawn = drawn;
        if self.problems_scroll > drawn.problem_total.saturating_sub(drawn.problem_lines) {
            self.problems_scroll = drawn.problem_total.saturating_sub(drawn.problem_lines);
        }
    }

    /// The verdict under the study's own method, once one has arrived.
    pub fn snapshot(&self) -> Option<&Snapshot> {
        self.feed.as_deref().map(|u| &*u.snapshot)
    }

    /// The verdict the page shows: the preview's when one is asked for and has
    /// arrived, otherwise the study's own.
    pub fn shown(&self) -> Option<&Snapshot> {
        let feed = self.feed.as_deref()?;
        match (&feed.preview, self.preview) {
            (Some(p), Some(m)) if p.decide_by == m => Some(p),
            _ => Some(&feed.snapshot),
        }
    }

    /// Whether a preview is on screen (asked for and arrived).
    pub fn previewing(&self) -> bool {
        match (self.shown(), self.snapshot()) {
            (Some(shown), Some(own)) => !std::ptr::eq(shown, own),
            _ => false,
        }
    }

    /// The cells in table order: planned first, by the chosen key.
    pub fn rows(&self) -> Vec<&CellView> {
        let Some(s) = self.shown() else {
            return Vec::new();
        };
        let mut rows: Vec<(usize, &CellView)> = s.cells.iter().enumerate().collect();
        let widest = |c: &CellView| {
            c.measures
                .iter()
                .map(|m| m.margin.unwrap_or(f64::INFINITY))
                .fold(0.0, f64::max)
        };
        rows.sort_by(|(i, a), (j, b)| {
            let order = match self.sort {
                SortKey::Worst => i.cmp(j),
                SortKey::Name => a.label.cmp(&b.label),
                SortKey::Responses => a.responses.cmp(&b.responses),
                // Out of reach (no number) is the most needed.
                SortKey::Needed => b
                    .needed
                    .unwrap_or(u64::MAX)
                    .cmp(&a.needed.unwrap_or(u64::MAX)),
                // No ETA while open is the latest; a met cell has none and comes last.
                SortKey::Eta => {
                    let key = |c: &CellView| match (c.needed, c.eta) {
                        (Some(0), _) => (0, None),
                        (_, Some(t)) => (1, Some(t)),
                        (_, None) => (2, None),
                    };
                    key(b).cmp(&key(a))
                }
                SortKey::Margin => widest(b).total_cmp(&widest(a)),
            };
            let order = if self.reversed {
                order.reverse()
            } else {
                order
            };
            a.planned
                .cmp(&b.planned)
                .reverse()
                .then(order)
                .then_with(|| a.label.cmp(&b.label))
        });
        rows.into_iter().map(|(_, c)| c).collect()
    }

    /// The selected cell's row in [`App::rows`].
    pub fn selected_row(&self) -> Option<usize> {
        let label = self.selected.as_ref()?;
        self.rows().iter().position(|c| &c.label == label)
    }

    /// The selected cell, as the page shows it.
    pub fn selected_cell(&self) -> Option<&CellView> {
        let label = self.selected.as_ref()?;
        self.shown()?.cells.iter().find(|c| &c.label == label)
    }

    /// Take one event; say what the caller should do.
    pub fn update(&mut self, event: Event) -> Vec<Effect> {
        match event {
            Event::Key(key) => self.key(key),
            Event::Resize(w, h) => {
                self.size = (w, h);
                self.dirty = true;
                Vec::new()
            }
            Event::Tick(now) => {
                // Redraw when the minute shown changes.
                if now.as_second().div_euclid(60) != self.now.as_second().div_euclid(60) {
                    self.dirty = true;
                }
                self.now = now;
                Vec::new()
            }
            Event::Feed(update) => self.take_update(update),
            Event::Stop => vec![Effect::Quit],
        }
    }

    fn take_update(&mut self, mut update: Box<Update>) -> Vec<Effect> {
        let mut effects = Vec::new();
        for notice in std::mem::take(&mut update.notices) {
            if self.notices.len() == NOTICES_KEPT {
                self.notices.pop_front();
            }
            self.notices.push_back(notice);
        }
        // The clock on screen never lags the verdict it shows (the feed may look
        // between two ticks).
        if update.snapshot.as_of > self.now {
            self.now = update.snapshot.as_of;
        }
        let ready = update.snapshot.ready_to_close;
        if update.caught_up_once {
            if self.ready_seen == Some(false) && ready {
                effects.push(Effect::Bell);
            }
            // "Since" only for a change seen while watching: a study already ready
            // at the first read became ready at a moment the dashboard did not see.
            if ready && self.ready_seen == Some(false) {
                self.ready_since = Some(update.snapshot.as_of);
            }
            if !ready {
                self.ready_since = None;
            }
            self.ready_seen = Some(ready);
        }
        self.feed = Some(update);
        let before = self.selected.clone();
        if self.selected_row().is_none() {
            self.selected = self.rows().first().map(|c| c.label.clone());
        }
        if self.selected != before {
            effects.extend(self.focus());
        }
        self.dirty = true;
        effects
    }

    /// The reading thread's focus, for the page now shown.
    fn focus(&self) -> Option<Effect> {
        let label = match self.page {
            Page::Cell => self.selected.clone(),
            Page::Cells | Page::Problems => None,
        };
        Some(Effect::Tell(Command::Focus(label)))
    }

    fn key(&mut self, key: KeyEvent) -> Vec<Effect> {
        if key.kind != KeyEventKind::Press {
            return Vec::new();
        }
        self.dirty = true;
        let ctrl = key.modifiers.contains(KeyModifiers::CONTROL);
        if ctrl && matches!(key.code, KeyCode::Char('c')) {
            return vec![Effect::Quit];
        }
        if let Some(overlay) = self.overlay {
            return self.overlay_key(overlay, key.code);
        }
        match key.code {
            KeyCode::Char('q') => vec![Effect::Quit],
            KeyCode::Esc | KeyCode::Backspace => self.back(key.code == KeyCode::Esc),
            KeyCode::Char('?') => {
                self.overlay = Some(Overlay::Help);
                Vec::new()
            }
            KeyCode::Char('m') => {
                let current = self.preview.or(self.snapshot().map(|s| s.decide_by));
                let cursor = current
                    .and_then(|m| Method::ALL.iter().position(|&x| x == m))
                    .unwrap_or(0);
                self.overlay = Some(Overlay::Methods { cursor });
                Vec::new()
            }
            KeyCode::Char('p') => {
                self.page = if self.page == Page::Problems {
                    Page::Cells
                } else {
                    Page::Problems
                };
                self.problems_scroll = 0;
                self.focus().into_iter().collect()
            }
            KeyCode::Enter if self.page == Page::Cells && self.selected.is_some() => {
                self.page = Page::Cell;
                self.measure = 0;
                self.focus().into_iter().collect()
            }
            KeyCode::Char('s') if self.page == Page::Cells => {
                self.sort = self.sort.next();
                Vec::new()
            }
            KeyCode::Char('r') if self.page == Page::Cells => {
                self.reversed = !self.reversed;
                Vec::new()
            }
            KeyCode::Char('t') if self.page == Page::Cell => {
                self.cell_part = match self.cell_part {
                    CellPart::Methods => CellPart::Trend,
                    CellPart::Trend => CellPart::Methods,
                };
                Vec::new()
            }
            KeyCode::Left | KeyCode::Char('h') if self.page == Page::Cell => {
                self.measure = self.measure.saturating_sub(1);
                Vec::new()
            }
            KeyCode::Right | KeyCode::Char('l') | KeyCode::Tab if self.page == Page::Cell => {
                let count = self.selected_cell().map_or(0, |c| c.measures.len());
                self.measure = if key.code == KeyCode::Tab && self.measure + 1 >= count {
                    0
                } else {
                    (self.measure + 1).min(count.saturating_sub(1))
                };
                Vec::new()
            }
            code => {
                if let Some(step) = self.step(code) {
                    self.move_by(step)
                } else {
                    self.dirty = false;
                    Vec::new()
                }
            }
        }
    }

    /// How far a movement key moves; `None` for other keys.
    fn step(&self, code: KeyCode) -> Option<isize> {
        let page = match self.page {
            Page::Problems => self.drawn.problem_lines.max(1),
            _ => self.drawn.rows.max(1),
        } as isize;
        Some(match code {
            KeyCode::Up | KeyCode::Char('k') => -1,
            KeyCode::Down | KeyCode::Char('j') => 1,
            KeyCode::PageUp => -page,
            KeyCode::PageDown => page,
            KeyCode::Home | KeyCode::Char('g') => isize::MIN / 2,
            KeyCode::End | KeyCode::Char('G') => isize::MAX / 2,
            _ => return None,
        })
    }

    fn move_by(&mut self, step: isize) -> Vec<Effect> {
        if self.page == Page::Problems {
            let last = self
                .drawn
                .problem_total
                .saturating_sub(self.drawn.problem_lines);
            self.problems_scroll = self.problems_scroll.saturating_add_signed(step).min(last);
            return Vec::new();
        }
        let rows = self.rows();
        if rows.is_empty() {
            return Vec::new();
        }
        let at = self.selected_row().unwrap_or(0);
        let to = at.saturating_add_signed(step).min(rows.len() - 1);
        let label = rows[to].label.clone();
        if Some(&label) == self.selected.as_ref() {
            return Vec::new();
        }
        self.selected = Some(label);
        self.measure = self.measure.min(
            self.selected_cell()
                .map_or(0, |c| c.measures.len().saturating_sub(1)),
        );
        self.focus().into_iter().collect()
    }

    /// Esc or Backspace: leave the page, then the preview; Esc at the top quits.
    fn back(&mut self, esc: bool) -> Vec<Effect> {
        if self.page != Page::Cells {
            self.page = Page::Cells;
            return self.focus().into_iter().collect();
        }
        if self.preview.is_some() {
            self.preview = None;
            return vec![Effect::Tell(Command::Preview(None))];
        }
        if esc { vec![Effect::Quit] } else { Vec::new() }
    }

    fn overlay_key(&mut self, overlay: Overlay, code: KeyCode) -> Vec<Effect> {
        match (overlay, code) {
            (_, KeyCode::Char('q')) => vec![Effect::Quit],
            (Overlay::Help, _) => {
                self.overlay = None;
                Vec::new()
            }
            (Overlay::Methods { .. }, KeyCode::Esc | KeyCode::Char('m')) => {
                self.overlay = None;
                Vec::new()
            }
            (Overlay::Methods { cursor }, KeyCode::Up | KeyCode::Char('k')) => {
                self.overlay = Some(Overlay::Methods {
                    cursor: cursor.saturating_sub(1),
                });
                Vec::new()
            }
            (Overlay::Methods { cursor }, KeyCode::Down | KeyCode::Char('j')) => {
                self.overlay = Some(Overlay::Methods {
                    cursor: (cursor + 1).min(Method::ALL.len() - 1),
                });
                Vec::new()
            }
            (Overlay::Methods { cursor }, KeyCode::Enter) => {
                self.overlay = None;
                let chosen = Method::ALL[cursor.min(Method::ALL.len() - 1)];
                let own = self.snapshot().map(|s| s.decide_by);
                let preview = (Some(chosen) != own).then_some(chosen);
                if preview == self.preview {
                    return Vec::new();
                }
                self.preview = preview;
                vec![Effect::Tell(Command::Preview(preview))]
            }
            (Overlay::Methods { .. }, _) => {
                self.dirty = false;
                Vec::new()
            }
        }
    }
}
