//! What the dashboard draws: a pure function of the [`App`] (and so of the feed's
//! last [`Update`](super::feed::Update)) onto a ratatui frame. No statistics are
//! computed here; numbers are only formatted. Text that came from the responses file
//! (cell values, answers, ids, reasons) goes through [`report::clean`] first, so no
//! control character or escape sequence reaches the terminal, and long values end
//! in an ellipsis.

use ratatui::Frame;
use ratatui::layout::{Alignment, Constraint, Layout, Rect};
use ratatui::style::{Modifier, Style};
use ratatui::symbols::Marker;
use ratatui::text::{Line, Span};
use ratatui::widgets::{
    Axis, Block, Cell, Chart, Clear, Dataset, GraphType, LegendPosition, LineGauge, Padding,
    Paragraph, Row, Sparkline, Table, Wrap,
};

use super::app::{App, CellPart, Drawn, Overlay, Page};
use super::feed::{ARRIVAL_HOURS, Reading};
use super::format::{bytes, count, duration, moment, percent1, points1, short_moment};
use super::theme::{STATUS_LEGEND, status_symbol, status_text};
use crate::assess::{CellView, MeasureView, Snapshot, Status};
use crate::bounds::{BoundRow, Guarantee, Method};
use crate::report::{self, CAUTIONS, clean, confidence_label};

/// The smallest terminal the dashboard draws in.
pub const MIN_WIDTH: u16 = 80;
pub const MIN_HEIGHT: u16 = 24;

/// Draw the whole screen; say what the layout turned out to be.
pub fn draw(frame: &mut Frame, app: &App) -> Drawn {
    let area = frame.area();
    if area.width < MIN_WIDTH || area.height < MIN_HEIGHT {
        too_small(frame, area, app);
        return Drawn::default();
    }
    let shown = app.shown();
    let reading = app.feed.as_deref().map(|u| &u.reading);
    let gauge = matches!(reading, Some(Reading::FirstRead { .. }));
    let preview_line = app.preview.is_some();
    let [
        title,
        source,
        method,
        verdict,
        preview,
        progress,
        body,
        footer,
    ] = Layout::vertical([
        Constraint::Length(1),
        Constraint::Length(1),
        Constraint::Length(1),
        Constraint::Length(1),
        Constraint::Length(u16::from(preview_line)),
        Constraint::Length(u16::from(gauge)),
        Constraint::Fill(1),
        Constraint::Length(1),
    ])
    .areas(area);
    draw_title(frame, title, app);
    draw_source(frame, source, app);
    draw_method(frame, method, app, shown);
    draw_verdict(frame, verdict, app, shown);
    if preview_line {
        draw_preview(frame, preview, app);
    }
    if let Some(Reading::FirstRead {
        done,
        total,
        bytes_per_second,
    }) = reading
    {
        draw_gauge(frame, progress, app, *done, *total, *bytes_per_second);
    }
    let mut drawn = Drawn {
        offset: app.drawn.offset,
        ..Drawn::default()
    };
    match app.page {
        Page::Cells => draw_cells(frame, body, app, &mut drawn),
        Page::Cell => draw_cell(frame, body, app),
        Page::Problems => draw_problems(frame, body, app, &mut drawn),
    }
    draw_footer(frame, footer, app);
    match app.overlay {
        Some(Overlay::Help) => draw_help(frame, area, app),
        Some(Overlay::Methods { cursor }) => draw_methods(frame, area, app, cursor),
        None => {}
    }
    drawn
}

fn too_small(frame: &mut Frame, area: Rect, app: &App) {
    let text = vec![
        Line::from(Span::styled("closeout watch", app.theme.heading)),
        Line::from(""),
        Line::from(format!(
            "This terminal is {}×{}; the dashboard needs at least {MIN_WIDTH}×{MIN_HEIGHT}.",
            area.width, area.height
        )),
        Line::from("Make the window larger, or follow the study as plain lines with"),
        Line::from("closeout status STUDY.toml --follow"),
        Line::from(""),
        Line::from("q quits."),
    ];
    let height = (text.len() as u16).min(area.height);
    let top = area.y + area.height.saturating_sub(height) / 2;
    let rect = Rect::new(area.x, top, area.width, height);
    frame.render_widget(
        Paragraph::new(text)
            .alignment(Alignment::Center)
            .wrap(Wrap { trim: true }),
        rect,
    );
}

fn draw_title(frame: &mut Frame, area: Rect, app: &App) {
    let title = app
        .snapshot()
        .map_or_else(String::new, |s| clean(&s.title, 120));
    let clock = format!(
        "{}{} ",
        if app.simulated {
            "simulated clock · "
        } else {
            ""
        },
        moment(app.now, &app.zone)
    );
    let left = format!(" closeout · {title}");
    let room = (area.width as usize).saturating_sub(clock.chars().count() + 1);
    let left = fit(&left, room);
    let gap = (area.width as usize).saturating_sub(left.chars().count() + clock.chars().count());
    let line = Line::from(vec![
        Span::raw(left),
        Span::raw(" ".repeat(gap)),
        Span::raw(clock),
    ]);
    frame.render_widget(Paragraph::new(line).style(app.theme.title), area);
}

/// Cut `text` to `width` characters, ending in an ellipsis when cut.
fn fit(text: &str, width: usize) -> String {
    if text.chars().count() <= width {
        return text.to_string();
    }
    let mut out: String = text.chars().take(width.saturating_sub(1)).collect();
    out.push('…');
    out
}

fn draw_source(frame: &mut Frame, area: Rect, app: &App) {
    let t = &app.theme;
    let Some(update) = app.feed.as_deref() else {
        frame.render_widget(Paragraph::new(" starting…").style(t.faint), area);
        return;
    };
    let s = &update.snapshot;
    let file = std::path::Path::new(&s.source_file)
        .file_name()
        .map_or_else(
            || s.source_file.clone(),
            |n| n.to_string_lossy().into_owned(),
        );
    let (state, style) = match &update.reading {
        Reading::Starting => ("starting".to_string(), t.faint),
        Reading::FirstRead { done, total, .. } => (
            format!(
                "first read {:.0}%",
                100.0 * *done as f64 / (*total).max(1) as f64
            ),
            t.open,
        ),
        Reading::Following => match update.last_reset {
            Some((at, why)) => (
                format!(
                    "following; counted again from the start at {} (file {why})",
                    short_moment(at, app.now, &app.zone)
                ),
                t.warning,
            ),
            None => ("following".to_string(), t.met),
        },
        Reading::WaitingForFile => (
            "waiting for the file (last figures stand)".into(),
            t.warning,
        ),
        Reading::HeaderProblem(_) => ("header does not fit the study (see p)".into(), t.warning),
        Reading::Failed(_) => ("cannot read the file (see p)".into(), t.warning),
    };
    let newest = s.newest_response.map_or_else(
        || "no arrival times".to_string(),
        |n| format!("newest {}", short_moment(n, app.now, &app.zone)),
    );
    let mut spans = vec![
        Span::raw(format!(" {}", clean(&file, 40))),
        Span::styled(" · ", t.faint),
        Span::styled(state, style),
        Span::styled(" · ", t.faint),
        Span::raw(format!("{} counted", count(s.responses))),
        Span::styled(" · ", t.faint),
    ];
    let rejected = format!("{} rejected", count(s.rows_rejected));
    spans.push(if s.rows_rejected > 0 {
        Span::styled(rejected, t.warning)
    } else {
        Span::raw(rejected)
    });
    spans.push(Span::styled(" · ", t.faint));
    spans.push(Span::raw(format!("{} duplicates", count(s.duplicates))));
    spans.push(Span::styled(" · ", t.faint));
    spans.push(Span::raw(newest));
    frame.render_widget(Paragraph::new(Line::from(spans)), area);
}

fn draw_method(frame: &mut Frame, area: Rect, app: &App, shown: Option<&Snapshot>) {
    let t = &app.theme;
    let Some(s) = shown else {
        return;
    };
    let level = if s.simultaneous {
        format!(
            "{} for all cells at once",
            confidence_label(s.confidence, 1.0 - s.confidence)
        )
    } else {
        confidence_label(s.confidence, 1.0 - s.confidence)
    };
    let line = Line::from(vec![
        Span::styled(" target ", t.label),
        Span::raw(format!("±{:.1} pts at {level}", 100.0 * s.margin_target)),
        Span::styled(" · decided by ", t.label),
        Span::styled(s.decide_by.name(), t.deciding),
        Span::raw(format!(" · {}: {}", s.guarantee, s.guarantee.meaning())),
    ]);
    frame.render_widget(Paragraph::new(line), area);
}

fn draw_verdict(frame: &mut Frame, area: Rect, app: &App, shown: Option<&Snapshot>) {
    let t = &app.theme;
    let Some(s) = shown else {
        frame.render_widget(
            Paragraph::new(" reading the responses file…").style(t.collecting),
            area,
        );
        return;
    };
    let under = if app.previewing() {
        format!(" under {}", s.decide_by)
    } else {
        String::new()
    };
    let (text, style) = if s.ready_to_close {
        let since = match (app.ready_since, app.previewing()) {
            (Some(at), false) => format!(" · since {}", moment(at, &app.zone)),
            _ => String::new(),
        };
        (
            format!(
                " ✓ READY TO CLOSE{under} · all {} planned cells met{since} ",
                s.cells_planned
            ),
            t.ready,
        )
    } else {
        let eta = match s.last_eta {
            Some(at) => format!(
                "last cell expected {} (in {})",
                moment(at, &app.zone),
                duration(at.duration_since(s.as_of))
            ),
            None => "no ETA yet for every open cell".to_string(),
        };
        (
            format!(
                " STILL COLLECTING{under} · {} of {} planned cells met · {eta} ",
                s.cells_met, s.cells_planned
            ),
            t.collecting,
        )
    };
    let width = area.width as usize;
    let text = format!("{text:width$}");
    frame.render_widget(Paragraph::new(fit(&text, width)).style(style), area);
}

fn draw_preview(frame: &mut Frame, area: Rect, app: &App) {
    let t = &app.theme;
    let own = app.snapshot().map_or("?", |s| s.decide_by.name());
    let text = match (app.preview, app.previewing()) {
        (Some(m), true) => format!(
            " PREVIEW under {m} ({}) · the study decides by {own}, its file unchanged · Esc ends it",
            guarantee_of(app, m)
        ),
        (Some(m), false) => format!(" PREVIEW under {m}: computing…"),
        (None, _) => String::new(),
    };
    let width = area.width as usize;
    frame.render_widget(
        Paragraph::new(fit(&format!("{text:width$}"), width)).style(t.preview),
        area,
    );
}

/// The guarantee a method gives in this study, as the intervals computed say (with
/// weights most methods are only approximate): the focused cell's, which hold every
/// method, then the verdict's, which hold the deciding method's. A method in neither
/// gives its own guarantee, made approximate when a measure was computed with
/// weights (an effective n) and the method is not rigorous with them.
fn guarantee_of(app: &App, m: Method) -> Guarantee {
    let focused = app
        .feed
        .as_deref()
        .and_then(|u| u.focus.as_ref())
        .map(|f| f.methods.iter().flatten());
    let shown = app.shown();
    let verdict = shown
        .into_iter()
        .flat_map(|s| &s.cells)
        .flat_map(|c| &c.measures)
        .flat_map(|measure| &measure.bounds);
    if let Some(b) = focused
        .into_iter()
        .flatten()
        .chain(verdict)
        .find(|b| b.method == m)
    {
        return b.guarantee;
    }
    let weighted = shown
        .into_iter()
        .flat_map(|s| &s.cells)
        .flat_map(|c| &c.measures)
        .any(|measure| measure.effective_n.is_some());
    if weighted && !m.rigorous_with_weights() {
        Guarantee::Approximate
    } else {
        m.guarantee()
    }
}

/// The intervals the cell page lists for measure `index` of cell `c`: every method's
/// from the feed's focus on that cell, or until it arrives the verdict's own (the
/// deciding method's).
fn cell_rows<'a>(app: &'a App, c: &'a CellView, index: usize) -> &'a [BoundRow] {
    app.feed
        .as_deref()
        .and_then(|u| u.focus.as_ref())
        .filter(|f| f.label == c.label)
        .and_then(|f| f.methods.get(index))
        .or_else(|| c.measures.get(index).map(|m| &m.bounds))
        .map_or(&[], Vec::as_slice)
}

fn draw_gauge(frame: &mut Frame, area: Rect, app: &App, done: u64, total: u64, rate: f64) {
    let t = &app.theme;
    let left = if rate > 0.0 {
        let secs = (total.saturating_sub(done)) as f64 / rate;
        format!(
            " · about {} left",
            duration(jiff::SignedDuration::from_secs(secs.ceil() as i64))
        )
    } else {
        String::new()
    };
    let speed = if rate > 0.0 {
        format!(" · {}/s{left}", bytes(rate as u64))
    } else {
        String::new()
    };
    let label = format!(" first read: {} of {}{speed} ", bytes(done), bytes(total));
    let ratio = if total == 0 {
        0.0
    } else {
        (done as f64 / total as f64).clamp(0.0, 1.0)
    };
    frame.render_widget(
        LineGauge::default()
            .ratio(ratio)
            .label(label)
            .filled_style(t.bar.add_modifier(Modifier::BOLD))
            .unfilled_style(t.faint),
        area,
    );
}

/// The widest (deciding) measure of a cell: the one with the largest margin, a
/// measure without a margin counting as the widest.
fn widest(cell: &CellView) -> Option<&MeasureView> {
    cell.measures.iter().max_by(|a, b| {
        a.margin
            .unwrap_or(f64::INFINITY)
            .total_cmp(&b.margin.unwrap_or(f64::INFINITY))
    })
}

/// A progress bar `width` characters wide, in eighths.
fn bar(progress: f64, width: usize) -> (String, String) {
    const PARTS: [char; 8] = [' ', '▏', '▎', '▍', '▌', '▋', '▊', '▉'];
    let eighths = (progress.clamp(0.0, 1.0) * (width * 8) as f64).round() as usize;
    let full = eighths / 8;
    let mut filled = "█".repeat(full);
    if full < width && !eighths.is_multiple_of(8) {
        filled.push(PARTS[eighths % 8]);
    }
    let rest = width.saturating_sub(filled.chars().count());
    (filled, "·".repeat(rest))
}

fn draw_cells(frame: &mut Frame, area: Rect, app: &App, drawn: &mut Drawn) {
    let t = &app.theme;
    let rows = app.rows();
    let Some(s) = app.shown() else {
        frame.render_widget(
            Block::bordered().border_style(t.border).title(" cells "),
            area,
        );
        return;
    };
    let planned = rows.iter().filter(|c| c.planned).count();
    // Statuses as words when there is room, as symbols with a legend otherwise.
    let words = area.width >= 100;
    let unplanned = match rows.len() - planned {
        0 => String::new(),
        k => format!(", {k} unplanned"),
    };
    let order = format!(
        "{}{}",
        app.sort.describe(),
        if app.reversed { ", reversed" } else { "" }
    );
    let title = if words {
        format!(
            " cells: {planned} planned{unplanned} · {order} · target ±{:.1} ",
            100.0 * s.margin_target
        )
    } else {
        format!(" cells: {planned} planned{unplanned} · {order} · {STATUS_LEGEND} ")
    };
    let block = Block::bordered().border_style(t.border).title(title);
    let mut inner = block.inner(area);
    frame.render_widget(block, area);
    // With room to spare below the table, the selected cell's measures.
    let panel_height = app
        .selected_cell()
        .map_or(0, |c| c.measures.len() as u16 + 4);
    if panel_height > 0 && inner.height >= rows.len() as u16 + 1 + panel_height {
        let [table, panel] =
            Layout::vertical([Constraint::Fill(1), Constraint::Length(panel_height)]).areas(inner);
        inner = table;
        if let Some(c) = app.selected_cell() {
            draw_cell_panel(frame, panel, app, s, c);
        }
    }
    let widest_col = inner.width >= 120;
    let visible = inner.height.saturating_sub(1) as usize;
    let selected = app.selected_row();
    // Keep the selection in view, moving the window as little as possible.
    let mut offset = drawn.offset.min(rows.len().saturating_sub(visible));
    if let Some(sel) = selected {
        if sel < offset {
            offset = sel;
        } else if visible > 0 && sel >= offset + visible {
            offset = sel + 1 - visible;
        }
    }
    drawn.offset = offset;
    drawn.rows = visible;

    let bar_width = 7;
    let status_width: u16 = if words { 9 } else { 1 };
    let mut header = vec![
        "",
        if words { "status" } else { "" },
        "cell",
        "resp.",
        "progress",
        "est.",
        "margin",
        "need",
        "rate/h",
        "ETA",
    ];
    if widest_col {
        header.push("widest measure");
    }
    // The counts, the responses still needed and the rates, as shown: their columns
    // are as wide as the widest of them (over every row, so that they do not move
    // while the window scrolls), so that no figure loses a digit.
    let figures: Vec<[String; 3]> = rows
        .iter()
        .map(|c| {
            let needed = match (c.status, c.needed) {
                (Status::Met, _) => String::new(),
                (_, Some(k)) => count(k),
                (_, None) => "—".to_string(),
            };
            let rate = c.rate_per_hour.map_or("—".into(), |r| format!("{r:.1}"));
            [count(c.responses), needed, rate]
        })
        .collect();
    // (26: the widest count, u64::MAX with its spaces.)
    let [resp_width, need_width, rate_width] = [0, 1, 2].map(|k| {
        let widths = figures
            .iter()
            .filter_map(|f| f.get(k))
            .map(|t| Span::raw(t).width());
        widths.max().unwrap_or(0).clamp(6, 26) as u16
    });
    let fixed: u16 = 1
        + status_width
        + resp_width
        + (bar_width as u16 + 5)
        + 6
        + 6
        + need_width
        + rate_width
        + 9
        + if widest_col { 18 } else { 0 };
    let columns = 10 + u16::from(widest_col);
    let label_width = inner.width.saturating_sub(fixed + columns - 1).max(8);
    let mut widths = vec![
        Constraint::Length(1),
        Constraint::Length(status_width),
        Constraint::Length(label_width),
        Constraint::Length(resp_width),
        Constraint::Length(bar_width as u16 + 5),
        Constraint::Length(6),
        Constraint::Length(6),
        Constraint::Length(need_width),
        Constraint::Length(rate_width),
        Constraint::Length(9),
    ];
    if widest_col {
        widths.push(Constraint::Length(18));
    }
    let body: Vec<Row> = rows
        .iter()
        .enumerate()
        .skip(offset)
        .take(visible)
        .map(|(i, c)| {
            let is_selected = Some(i) == selected;
            let [responses, needed, rate] = figures.get(i).cloned().unwrap_or_default();
            let w = widest(c);
            let status_style = if c.planned {
                t.status(c.status)
            } else {
                t.unplanned
            };
            let (filled, empty) = bar(c.progress, bar_width);
            let progress = Line::from(vec![
                Span::styled(filled, t.bar),
                Span::styled(empty, t.faint),
                Span::raw(format!("{:>4.0}%", 100.0 * c.progress)),
            ]);
            let margin = w.and_then(|m| m.margin).map_or_else(
                || Span::raw("—"),
                |m| {
                    let style = if m <= s.margin_target {
                        t.within
                    } else {
                        Style::new()
                    };
                    Span::styled(points1(m), style)
                },
            );
            let eta = match (c.status, c.eta) {
                (Status::Met, _) => String::new(),
                (_, Some(at)) => short_moment(at, s.as_of, &app.zone),
                (_, None) => "—".to_string(),
            };
            let mut cells = vec![
                Cell::from(if is_selected { "▶" } else { " " }),
                Cell::from(Span::styled(
                    if words {
                        status_text(c.status, c.planned)
                    } else {
                        status_symbol(c.status, c.planned)
                    },
                    status_style,
                )),
                Cell::from(fit(&clean(&c.label, 200), label_width as usize)),
                Cell::from(Line::from(responses).alignment(Alignment::Right)),
                Cell::from(progress),
                Cell::from(
                    Line::from(w.and_then(|m| m.estimate).map_or("—".into(), percent1))
                        .alignment(Alignment::Right),
                ),
                Cell::from(Line::from(margin).alignment(Alignment::Right)),
                Cell::from(Line::from(needed).alignment(Alignment::Right)),
            ];
            cells.push(Cell::from(Line::from(rate).alignment(Alignment::Right)));
            cells.push(Cell::from(eta));
            if widest_col {
                cells.push(Cell::from(w.map_or(String::new(), |m| clean(&m.name, 18))));
            }
            let row = Row::new(cells);
            if is_selected {
                row.style(t.selected)
            } else {
                row
            }
        })
        .collect();
    let table = Table::new(body, widths)
        .header(Row::new(header).style(t.heading))
        .column_spacing(1);
    frame.render_widget(table, inner);
    if rows.is_empty() {
        let [_, message] =
            Layout::vertical([Constraint::Length(1), Constraint::Length(1)]).areas(inner);
        frame.render_widget(
            Paragraph::new(" no responses counted yet").style(t.faint),
            message,
        );
    }
}

/// The selected cell's measures in a few lines, under the cells table.
fn draw_cell_panel(frame: &mut Frame, area: Rect, app: &App, s: &Snapshot, c: &CellView) {
    let t = &app.theme;
    let mut facts = format!(
        "─ {} · {} · {} responses",
        clean(&c.label, 40),
        status_text(c.status, c.planned),
        count(c.responses)
    );
    if let Some(min) = c.minimum {
        facts.push_str(&format!(", minimum {}", count(min)));
    }
    match (c.status, c.needed) {
        (Status::Met, _) => {}
        (_, Some(k)) => facts.push_str(&format!(" · {} more needed", count(k))),
        (_, None) => facts.push_str(" · out of reach at this proportion"),
    }
    facts.push(' ');
    let width = area.width as usize;
    let rule = format!("{facts:─<width$}");
    let [title, table, hint] = Layout::vertical([
        Constraint::Length(1),
        Constraint::Fill(1),
        Constraint::Length(1),
    ])
    .areas(area);
    frame.render_widget(Paragraph::new(fit(&rule, width)).style(t.border), title);
    let rows: Vec<Row> = c
        .measures
        .iter()
        .map(|m| {
            let margin = match m.margin {
                Some(mg) => Span::styled(
                    points1(mg),
                    if mg <= s.margin_target {
                        t.within
                    } else {
                        Style::new()
                    },
                ),
                None => Span::raw("—"),
            };
            Row::new(vec![
                Cell::from(clean(&m.name, 30)),
                Cell::from(
                    Line::from(format!("{} / {}", count(m.successes), count(m.n)))
                        .alignment(Alignment::Right),
                ),
                Cell::from(
                    Line::from(m.estimate.map_or("—".into(), percent1)).alignment(Alignment::Right),
                ),
                Cell::from(Line::from(margin).alignment(Alignment::Right)),
                Cell::from(if m.met { "yes" } else { "no" }),
                Cell::from(
                    Line::from(match (m.met, m.needed) {
                        (true, _) => String::new(),
                        (false, Some(k)) => count(k),
                        (false, None) => "—".into(),
                    })
                    .alignment(Alignment::Right),
                ),
            ])
        })
        .collect();
    let header = vec![
        "measure".to_string(),
        "yes / answers".to_string(),
        "est.".to_string(),
        "margin".to_string(),
        format!("within ±{:.1}", 100.0 * s.margin_target),
        "answers needed".to_string(),
    ];
    frame.render_widget(
        Table::new(
            rows,
            [
                Constraint::Fill(1),
                Constraint::Length(15),
                Constraint::Length(6),
                Constraint::Length(7),
                Constraint::Length(12),
                Constraint::Length(14),
            ],
        )
        .header(Row::new(header).style(t.heading))
        .column_spacing(1),
        table,
    );
    frame.render_widget(
        Paragraph::new(" Enter: every method side by side, the margin chart and the arrivals")
            .style(t.faint),
        hint,
    );
}

fn draw_cell(frame: &mut Frame, area: Rect, app: &App) {
    let t = &app.theme;
    let (Some(s), Some(c)) = (app.shown(), app.selected_cell()) else {
        frame.render_widget(
            Block::bordered().border_style(t.border).title(" cell "),
            area,
        );
        return;
    };
    let block = Block::bordered()
        .border_style(t.border)
        .title(format!(" cell {} ", clean(&c.label, 60)));
    let inner = block.inner(area);
    frame.render_widget(block, area);

    let m = c
        .measures
        .get(app.measure.min(c.measures.len().saturating_sub(1)));
    let methods_height = 3 + 1 + Method::ALL.len() as u16 + c.warnings.len().min(2) as u16;
    let side_by_side = inner.width >= 150;
    let stacked = !side_by_side && inner.height >= methods_height + 9;
    let (methods_area, trend_area) = if side_by_side {
        let [a, b] = Layout::horizontal([Constraint::Length(84), Constraint::Fill(1)]).areas(inner);
        (Some(a), Some(b))
    } else if stacked {
        let [a, b] = Layout::vertical([Constraint::Length(methods_height), Constraint::Fill(1)])
            .areas(inner);
        (Some(a), Some(b))
    } else {
        match app.cell_part {
            CellPart::Methods => (Some(inner), None),
            CellPart::Trend => (None, Some(inner)),
        }
    };
    if let Some(area) = methods_area {
        draw_cell_methods(frame, area, app, s, c, m);
    }
    if let Some(area) = trend_area {
        draw_trend(frame, area, app, s, c);
    }
}

fn draw_cell_methods(
    frame: &mut Frame,
    area: Rect,
    app: &App,
    s: &Snapshot,
    c: &CellView,
    m: Option<&MeasureView>,
) {
    let t = &app.theme;
    let status = if c.planned {
        Span::styled(status_text(c.status, true), t.status(c.status))
    } else {
        Span::styled("unplanned: counted, not part of the verdict", t.unplanned)
    };
    let mut facts = vec![
        status,
        Span::raw(format!(" · {} responses", count(c.responses))),
    ];
    if let Some(min) = c.minimum {
        facts.push(Span::raw(format!(" · minimum {}", count(min))));
    }
    if let Some(p) = c.population {
        facts.push(Span::raw(format!(" · population {}", count(p))));
    }
    match (c.status, c.needed) {
        (Status::Met, _) => {}
        (_, Some(k)) => facts.push(Span::raw(format!(" · {} more needed", count(k)))),
        (_, None) => facts.push(Span::raw(" · target out of reach at this proportion")),
    }
    if let Some(r) = c.rate_per_hour {
        facts.push(Span::raw(format!(" · {r:.1} an hour")));
    }
    if c.status != Status::Met {
        facts.push(Span::raw(match c.eta {
            Some(at) => format!(
                " · ETA {} (in {})",
                moment(at, &app.zone),
                duration(at.duration_since(s.as_of))
            ),
            None => " · no ETA".to_string(),
        }));
    }
    let mut lines = vec![Line::from(facts)];
    let mut tabs = vec![Span::styled("measure ", t.label)];
    for (i, measure) in c.measures.iter().enumerate() {
        let name = format!(" {} ", clean(&measure.name, 24));
        tabs.push(if i == app.measure {
            Span::styled(name, t.selected)
        } else {
            Span::raw(name)
        });
    }
    if c.measures.len() > 1 {
        tabs.push(Span::styled("  ←→ another measure", t.faint));
    }
    lines.push(Line::from(tabs));
    if let Some(m) = m {
        let mut summary = format!(
            "{} yes of {} yes-or-no answers · {} blank · {} unexpected · estimate {}",
            count(m.successes),
            count(m.n),
            count(m.missing),
            count(m.unexpected),
            m.estimate.map_or("none yet".into(), report::percent)
        );
        if let Some(e) = m.effective_n {
            summary.push_str(&format!(" · effective n {e:.1}"));
        }
        lines.push(Line::from(summary));
    }
    for w in c.warnings.iter().take(2) {
        lines.push(Line::from(Span::styled(clean(w, 200), t.warning)));
    }
    let head = lines.len() as u16;
    let [top, table_area] =
        Layout::vertical([Constraint::Length(head), Constraint::Fill(1)]).areas(area);
    frame.render_widget(Paragraph::new(lines), top);
    if m.is_none() {
        return;
    }
    let index = app.measure.min(c.measures.len().saturating_sub(1));
    let rows: Vec<Row> = cell_rows(app, c, index)
        .iter()
        .map(|b| {
            let deciding = b.method == s.decide_by;
            let mark = if deciding { "◆" } else { " " };
            let (interval, margin) = match (b.lower, b.upper, b.margin) {
                (Some(lo), Some(hi), Some(mg)) => (
                    format!("{} – {}", percent1(lo), percent1(hi)),
                    Span::styled(
                        points1(mg),
                        if mg <= s.margin_target {
                            t.within
                        } else {
                            Style::new()
                        },
                    ),
                ),
                _ => ("—".to_string(), Span::raw("—")),
            };
            let note = b.unavailable.or(b.note).unwrap_or("");
            let row = Row::new(vec![
                Cell::from(mark),
                Cell::from(b.method.name()),
                Cell::from(Line::from(interval).alignment(Alignment::Right)),
                Cell::from(Line::from(margin).alignment(Alignment::Right)),
                Cell::from(b.guarantee.name()),
                Cell::from(Span::styled(note, t.faint)),
            ]);
            if deciding { row.style(t.deciding) } else { row }
        })
        .collect();
    let table = Table::new(
        rows,
        [
            Constraint::Length(1),
            Constraint::Length(15),
            Constraint::Length(15),
            Constraint::Length(6),
            Constraint::Length(11),
            Constraint::Fill(1),
        ],
    )
    .header(
        Row::new(vec![
            "",
            "method",
            "interval",
            "margin",
            "guarantee",
            "note",
        ])
        .style(t.heading),
    )
    .column_spacing(1);
    frame.render_widget(table, table_area);
}

fn draw_trend(frame: &mut Frame, area: Rect, app: &App, s: &Snapshot, c: &CellView) {
    let t = &app.theme;
    let Some(update) = app.feed.as_deref() else {
        return;
    };
    let [chart_area, spark_label, spark_area, total_label, total_area] = Layout::vertical([
        Constraint::Fill(1),
        Constraint::Length(1),
        Constraint::Length(1),
        Constraint::Length(1),
        Constraint::Length(1),
    ])
    .areas(area);
    let observed: Vec<(f64, f64)> = if app.previewing() {
        // The history is under the study's own method; a preview shows its curve only.
        Vec::new()
    } else {
        update
            .history
            .get(&c.label)
            .map(|h| h.iter().map(|&(n, m)| (n as f64, 100.0 * m)).collect())
            .unwrap_or_default()
    };
    let focus = update.focus.as_ref().filter(|f| f.label == c.label);
    let projected: Vec<(f64, f64)> = focus
        .map(|f| {
            f.projected
                .iter()
                .map(|&(n, m)| (n as f64, 100.0 * m))
                .collect()
        })
        .unwrap_or_default();
    let target = 100.0 * s.margin_target;
    let xs = observed.iter().chain(&projected).map(|p| p.0);
    let x_min = xs.clone().fold(f64::INFINITY, f64::min);
    let x_max = xs.fold(f64::NEG_INFINITY, f64::max);
    let (x_min, x_max) = if x_min.is_finite() {
        (x_min.min(c.responses as f64), x_max.max(x_min + 1.0))
    } else {
        (0.0, (c.responses as f64).max(1.0))
    };
    let ys = observed.iter().chain(&projected).map(|p| p.1);
    // The first few responses give huge margins: the top leaves room for the margin
    // now (and the curve above it runs off the top) rather than squashing the rest.
    let now_margin = projected
        .first()
        .or(observed.last())
        .map_or(target, |p| p.1.max(target));
    let y_max = (ys.clone().fold(target, f64::max) * 1.1).min(now_margin * 1.6);
    let y_min = ys.fold(target, f64::min) * 0.8;
    let target_line = [(x_min, target), (x_max, target)];
    let mut datasets = vec![
        Dataset::default()
            .name(format!("target ±{target:.1}"))
            .marker(Marker::Braille)
            .graph_type(GraphType::Line)
            .style(t.target)
            .data(&target_line),
    ];
    if !projected.is_empty() {
        datasets.push(
            Dataset::default()
                .name("if the proportions hold")
                .marker(Marker::Dot)
                .graph_type(GraphType::Scatter)
                .style(t.projected)
                .data(&projected),
        );
    }
    if !observed.is_empty() {
        datasets.push(
            Dataset::default()
                .name("seen while watching")
                .marker(Marker::Braille)
                .graph_type(GraphType::Line)
                .style(t.observed)
                .data(&observed),
        );
    }
    let title = format!(
        " {} margin of the widest measure (points) against responses; target ±{target:.1} ",
        s.decide_by
    );
    let chart = Chart::new(datasets)
        .block(Block::new().title(Span::styled(title, t.label)))
        .x_axis(
            Axis::default()
                .bounds([x_min, x_max])
                .labels([count(x_min as u64), count(x_max as u64)])
                .style(t.faint),
        )
        .y_axis(
            Axis::default()
                .bounds([y_min, y_max])
                .labels([format!("{y_min:.1}"), format!("{y_max:.1}")])
                .style(t.faint),
        )
        .legend_position(Some(LegendPosition::TopRight))
        .hidden_legend_constraints((Constraint::Ratio(1, 2), Constraint::Ratio(1, 2)));
    frame.render_widget(chart, chart_area);

    let hours = spark_area.width as usize;
    let span = hours.min(ARRIVAL_HOURS);
    let spark = |data: Option<&Vec<u64>>| -> Option<Vec<u64>> {
        data.map(|d| d[d.len().saturating_sub(span)..].to_vec())
    };
    let cell_arrivals = spark(focus.and_then(|f| f.arrivals.as_ref()));
    let total_arrivals = spark(update.arrivals.as_ref());
    let label = |what: &str, data: &Option<Vec<u64>>| match data {
        Some(d) => format!(
            " {what}: arrivals per hour, last {} (most {} an hour)",
            duration(jiff::SignedDuration::from_hours(d.len() as i64)),
            d.iter().max().copied().unwrap_or(0)
        ),
        None if focus.is_none() => format!(" {what}: arrivals per hour…"),
        None => format!(" {what}: no arrival times (the study has no source.time column)"),
    };
    frame.render_widget(
        Paragraph::new(label("this cell", &cell_arrivals)).style(t.label),
        spark_label,
    );
    if let Some(d) = cell_arrivals {
        frame.render_widget(Sparkline::default().data(d).style(t.observed), spark_area);
    }
    frame.render_widget(
        Paragraph::new(label("all cells", &total_arrivals)).style(t.label),
        total_label,
    );
    if let Some(d) = total_arrivals {
        frame.render_widget(Sparkline::default().data(d).style(t.faint), total_area);
    }
}

/// Every line of the problems page.
fn problem_lines(app: &App, width: usize) -> Vec<Line<'static>> {
    let t = &app.theme;
    let mut lines: Vec<Line> = Vec::new();
    // A long entry continues on indented lines.
    let entry = |lines: &mut Vec<Line<'static>>, lead: String, text: &str, style: Style| {
        let indent = lead.chars().count();
        let wrapped = report::wrap(text, width.saturating_sub(indent).max(20));
        for (i, part) in wrapped.lines().enumerate() {
            let lead = if i == 0 {
                lead.clone()
            } else {
                " ".repeat(indent)
            };
            lines.push(Line::from(vec![
                Span::raw(lead),
                Span::styled(part.to_string(), style),
            ]));
        }
    };
    let heading = |text: String| Line::from(Span::styled(text, t.heading));
    if let Some(update) = app.feed.as_deref() {
        match &update.reading {
            Reading::HeaderProblem(m) | Reading::Failed(m) => {
                lines.push(heading("Reading the file".into()));
                entry(&mut lines, "  ".into(), m, t.warning);
                lines.push(Line::from(""));
            }
            Reading::WaitingForFile => {
                lines.push(heading("Reading the file".into()));
                lines.push(Line::from(Span::styled(
                    "  the responses file is missing: waiting for it; the last figures stand",
                    t.warning,
                )));
                lines.push(Line::from(""));
            }
            _ => {}
        }
    }
    let Some(s) = app.snapshot() else {
        return lines;
    };
    let listed = |shown: usize, total: u64| {
        if (shown as u64) < total {
            format!(" (the first {shown} listed)")
        } else {
            String::new()
        }
    };
    lines.push(heading(format!(
        "Rejected rows: {}{}",
        count(s.rows_rejected),
        listed(s.rejections.len(), s.rows_rejected)
    )));
    for r in &s.rejections {
        entry(
            &mut lines,
            format!("  line {:>8}  {:<15} ", r.line, r.kind),
            &clean(&r.reason, 400),
            Style::new(),
        );
    }
    lines.push(Line::from(""));
    lines.push(heading(format!(
        "Duplicate ids (the first response counts): {}{}",
        count(s.duplicates),
        listed(s.duplicate_ids.len(), s.duplicates)
    )));
    for d in &s.duplicate_ids {
        lines.push(Line::from(format!(
            "  line {:>8}  id '{}'",
            d.line,
            clean(&d.id, 60)
        )));
    }
    lines.push(Line::from(""));
    lines.push(heading(format!(
        "Unexpected answers, left out of the counts: {}",
        s.unexpected.len()
    )));
    for u in &s.unexpected {
        lines.push(Line::from(format!(
            "  {:<20} '{}' ×{}",
            clean(&u.measure, 20),
            clean(&u.value, 40),
            count(u.count)
        )));
    }
    let unplanned: Vec<&CellView> = s.cells.iter().filter(|c| !c.planned).collect();
    lines.push(Line::from(""));
    lines.push(heading(format!(
        "Unplanned cells, counted but not part of the verdict: {}",
        unplanned.len()
    )));
    for c in unplanned {
        lines.push(Line::from(format!(
            "  {:<40} {} responses",
            clean(&c.label, 40),
            count(c.responses)
        )));
    }
    let warnings: Vec<(&CellView, &String)> = s
        .cells
        .iter()
        .flat_map(|c| c.warnings.iter().map(move |w| (c, w)))
        .collect();
    if !warnings.is_empty() {
        lines.push(Line::from(""));
        lines.push(heading("Cell warnings".into()));
        for (c, w) in warnings {
            entry(
                &mut lines,
                format!("  {}: ", clean(&c.label, 40)),
                &clean(w, 400),
                Style::new(),
            );
        }
    }
    lines.push(Line::from(""));
    lines.push(heading(format!(
        "Notices, latest first: {}",
        app.notices.len()
    )));
    for n in app.notices.iter().rev() {
        entry(
            &mut lines,
            format!("  {}  ", moment(n.time, &app.zone)),
            &clean(&n.text, 400),
            Style::new(),
        );
    }
    lines
}

fn draw_problems(frame: &mut Frame, area: Rect, app: &App, drawn: &mut Drawn) {
    let t = &app.theme;
    let block = Block::bordered()
        .border_style(t.border)
        .title(" problems: rows, ids, answers, cells and notices ");
    let inner = block.inner(area);
    frame.render_widget(block, area);
    let lines = problem_lines(app, inner.width as usize);
    drawn.problem_total = lines.len();
    drawn.problem_lines = inner.height as usize;
    let scroll = app
        .problems_scroll
        .min(lines.len().saturating_sub(inner.height as usize));
    frame.render_widget(
        Paragraph::new(lines).scroll((scroll.min(u16::MAX as usize) as u16, 0)),
        inner,
    );
}

fn draw_footer(frame: &mut Frame, area: Rect, app: &App) {
    let t = &app.theme;
    let keys: &[(&str, &str)] = match app.page {
        Page::Cells => &[
            ("↑↓", "select"),
            ("Enter", "cell"),
            ("s", "sort"),
            ("r", "reverse"),
            ("m", "what if"),
            ("p", "problems"),
            ("?", "help"),
            ("q", "quit"),
        ],
        Page::Cell => &[
            ("↑↓", "cell"),
            ("←→", "measure"),
            ("t", "methods/chart"),
            ("m", "what if"),
            ("Esc", "back"),
            ("?", "help"),
            ("q", "quit"),
        ],
        Page::Problems => &[
            ("↑↓ PgUp PgDn", "scroll"),
            ("Esc", "back"),
            ("?", "help"),
            ("q", "quit"),
        ],
    };
    let mut spans = Vec::new();
    for (key, what) in keys {
        spans.push(Span::styled(format!(" {key}"), t.heading));
        spans.push(Span::raw(format!(" {what} ")));
    }
    frame.render_widget(Paragraph::new(Line::from(spans)), area);
}

/// A box of at most `width` × `height` in the middle of `area`.
fn middle(area: Rect, width: u16, height: u16) -> Rect {
    let w = width.min(area.width);
    let h = height.min(area.height);
    Rect::new(
        area.x + (area.width - w) / 2,
        area.y + (area.height - h) / 2,
        w,
        h,
    )
}

fn draw_help(frame: &mut Frame, area: Rect, app: &App) {
    let t = &app.theme;
    let keys = [
        ("↑ ↓  j k", "select a cell (scroll on the problems page)"),
        ("PgUp PgDn Home End", "move a page, or to the first or last"),
        (
            "Enter",
            "open the selected cell: every method, the chart, arrivals",
        ),
        ("← →  Tab", "on a cell: the next measure"),
        ("t", "on a cell, in a small terminal: methods or chart"),
        ("s  r", "sort the cells by another key; reverse the order"),
        ("m", "what if: preview the verdict under another method"),
        (
            "p",
            "problems: rejected rows, duplicates, unexpected answers",
        ),
        (
            "Esc  Backspace",
            "back; end a preview; Esc on the cells page quits",
        ),
        ("q  Ctrl-C", "quit"),
    ];
    let mut lines: Vec<Line> = keys
        .iter()
        .map(|(k, what)| {
            Line::from(vec![
                Span::styled(format!("{k:<19} "), t.heading),
                Span::raw(*what),
            ])
        })
        .collect();
    lines.push(Line::from(""));
    lines.push(Line::from(Span::styled(
        "What the guarantees mean",
        t.heading,
    )));
    for g in [
        Guarantee::Anytime,
        Guarantee::WorstCase,
        Guarantee::FixedN,
        Guarantee::Approximate,
    ] {
        lines.push(Line::from(format!("{:<12} {}", g.name(), g.meaning())));
    }
    lines.push(Line::from(""));
    lines.push(Line::from(Span::styled("Cautions", t.heading)));
    lines.push(Line::from(CAUTIONS));
    lines.push(Line::from(""));
    lines.push(Line::from(Span::styled("any key closes this box", t.faint)));
    let rect = middle(area, 96, 26);
    frame.render_widget(Clear, rect);
    frame.render_widget(
        Paragraph::new(lines).wrap(Wrap { trim: false }).block(
            Block::bordered()
                .border_style(t.heading)
                .padding(Padding::horizontal(1))
                .title(" keys and cautions "),
        ),
        rect,
    );
}

fn draw_methods(frame: &mut Frame, area: Rect, app: &App, cursor: usize) {
    let t = &app.theme;
    let own = app.snapshot().map(|s| s.decide_by);
    let mut lines: Vec<Line> = vec![
        Line::from(" Preview the verdict as another method would decide it."),
        Line::from(" The study file is not changed; Esc on the cells page ends it."),
        Line::from(""),
    ];
    for (i, m) in Method::ALL.iter().enumerate() {
        let mark = if Some(*m) == own {
            " (the study's)"
        } else if Some(*m) == app.preview {
            " (previewing)"
        } else {
            ""
        };
        let text = format!(
            " {} {:<16} {:<12}{mark}",
            if i == cursor { "▶" } else { " " },
            m.name(),
            guarantee_of(app, *m).name()
        );
        lines.push(if i == cursor {
            Line::from(Span::styled(text, t.selected))
        } else {
            Line::from(text)
        });
    }
    lines.push(Line::from(""));
    lines.push(Line::from(Span::styled(
        " ↑↓ choose · Enter preview · Esc cancel",
        t.faint,
    )));
    let rect = middle(area, 66, lines.len() as u16 + 2);
    frame.render_widget(Clear, rect);
    frame.render_widget(
        Paragraph::new(lines).block(
            Block::bordered()
                .border_style(t.heading)
                .title(" what if another method decided? "),
        ),
        rect,
    );
}
