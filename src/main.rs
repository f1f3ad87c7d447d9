//! The `closeout` command: argument parsing and exit codes; the library does the work.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use closeout::bounds::{self, Level, Query, SizeQuery};
use closeout::clock::Clock;
use closeout::event_log::EventLog;
use closeout::hints::{self, Hint, Hints};
use closeout::live::Live;
use closeout::study::Study;
use closeout::{assess, batch, dashboard, report};

/// Follow survey fieldwork: margins of error per quota cell and when collection can close.
#[derive(Parser)]
#[command(name = "closeout", version, about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Every method's interval, margin and guarantee for S successes in N responses.
    Margin {
        /// Successes: responses counted as yes.
        successes: u64,
        /// Responses counted as yes or no.
        n: u64,
        /// Confidence level, between 0 and 1.
        #[arg(long, default_value_t = 0.95)]
        confidence: f64,
        /// Size of the population sampled without replacement (finite population correction).
        #[arg(long)]
        population: Option<u64>,
        /// Planned size the anytime sequence is tuned for, fixed in advance (default: N).
        #[arg(long)]
        tune_for: Option<u64>,
        /// Print JSON instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// The responses each method needs for a target margin.
    Size {
        /// Target margin as a proportion: 0.05 for ±5 points.
        #[arg(long)]
        margin: f64,
        /// Confidence level, between 0 and 1.
        #[arg(long, default_value_t = 0.95)]
        confidence: f64,
        /// Size of the population sampled without replacement.
        #[arg(long)]
        population: Option<u64>,
        /// Expected proportion (default: the worst case over every outcome).
        #[arg(long)]
        expect: Option<f64>,
        /// Print JSON instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Where every quota cell stands now, and whether collection can close.
    Status {
        /// The study file (TOML).
        study: PathBuf,
        /// Output: a text table, the whole snapshot as JSON, or CSV (one row per cell × measure).
        #[arg(long, value_enum, default_value_t = Format::Text)]
        format: Format,
        /// Exit 0 when ready to close and 1 while still collecting (2 on error).
        #[arg(long)]
        exit_code: bool,
        /// The moment rates and ETAs refer to, RFC 3339 (default: now).
        #[arg(long, conflicts_with = "follow")]
        as_of: Option<String>,
        /// Keep following the responses file as it grows, until interrupted: a line
        /// when the verdict changes (text), or the snapshot whenever the tallies change (json).
        #[arg(long)]
        follow: bool,
        /// With --follow: exit 0 as soon as the study is ready to close.
        #[arg(long, requires = "follow")]
        until_ready: bool,
        /// With --follow: look at the file every second instead of watching its folder.
        #[arg(long, requires = "follow")]
        poll: bool,
    },
    /// The live dashboard: every cell's margin, needs and ETA, kept current as responses
    /// arrive. Without a terminal it prints what `status --follow` prints.
    Watch {
        /// The study file (TOML).
        study: PathBuf,
        /// Look at the file every second instead of watching its folder.
        #[arg(long)]
        poll: bool,
    },
}

#[derive(Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
enum Format {
    Text,
    Json,
    Csv,
}

/// What a successful run prints and how it exits.
struct Done {
    text: String,
    code: u8,
}

/// An error in what the user asked for or gave us (arguments, the study file, the
/// responses file): exit code 2.
struct Usage(String);

fn run(cli: Cli) -> Result<Done, Usage> {
    let usage = |e: bounds::BoundsError| Usage(e.to_string());
    match cli.command {
        Command::Margin {
            successes,
            n,
            confidence,
            population,
            tune_for,
            json,
        } => {
            let level = Level::from_confidence(confidence).map_err(usage)?;
            let mut q = Query::new(successes, n, level).map_err(usage)?;
            if let Some(total) = population {
                q = q.with_population(total).map_err(usage)?;
            }
            if let Some(t) = tune_for {
                q = q.with_tune_for(t).map_err(usage)?;
            }
            if n == 0 {
                return Err(Usage(
                    "responses must be at least 1 to give a margin".into(),
                ));
            }
            let rows = bounds::intervals(&q);
            let text = if json {
                format!("{}\n", report::margin_json(&q, &rows))
            } else {
                report::margin_text(&q, &rows)
            };
            Ok(Done { text, code: 0 })
        }
        Command::Size {
            margin,
            confidence,
            population,
            expect,
            json,
        } => {
            let level = Level::from_confidence(confidence).map_err(usage)?;
            let mut sq = SizeQuery::new(margin, level).map_err(usage)?;
            if let Some(total) = population {
                sq = sq.with_population(total).map_err(usage)?;
            }
            if let Some(p) = expect {
                sq = sq.with_expect(p).map_err(usage)?;
            }
            let rows = bounds::required_sizes(&sq);
            let text = if json {
                format!("{}\n", report::size_json(&sq, &rows))
            } else {
                report::size_text(&sq, &rows)
            };
            Ok(Done { text, code: 0 })
        }
        Command::Watch { study, poll } => {
            let study = Study::load(&study).map_err(|e| Usage(e.to_string()))?;
            let log = open_log(&study)?;
            if !std::io::stdout().is_terminal() {
                return Ok(follow_status(study, log, false, false, poll, false));
            }
            let options = dashboard::Options {
                clock: Clock::System,
                poll_only: poll,
                zone: jiff::tz::TimeZone::system(),
                theme: dashboard::Theme::from_env(),
            };
            let on_stop = |stop: std::sync::mpsc::Sender<dashboard::Event>| {
                // SIGTERM and SIGHUP end the dashboard as q does, restoring the terminal.
                if let Err(e) = ctrlc::set_handler(move || {
                    let _ = stop.send(dashboard::Event::Stop);
                }) {
                    eprintln!(
                        "closeout: cannot catch signals ({e}); a kill will leave the terminal as it is"
                    );
                }
            };
            match dashboard::run(study, log, options, on_stop) {
                Ok(()) => Ok(Done {
                    text: String::new(),
                    code: 0,
                }),
                Err(e) => {
                    eprintln!("closeout: the dashboard cannot use this terminal: {e}");
                    Ok(Done {
                        text: String::new(),
                        code: 1,
                    })
                }
            }
        }
        Command::Status {
            study,
            format,
            exit_code,
            as_of,
            follow,
            until_ready,
            poll,
        } => {
            if follow {
                let json = match format {
                    Format::Text => false,
                    Format::Json => true,
                    Format::Csv => {
                        return Err(Usage(
                            "--follow prints text or json: use --format text or --format json"
                                .into(),
                        ));
                    }
                };
                let study = Study::load(&study).map_err(|e| Usage(e.to_string()))?;
                let log = open_log(&study)?;
                return Ok(follow_status(
                    study,
                    log,
                    json,
                    until_ready,
                    poll,
                    exit_code,
                ));
            }
            let as_of = match as_of {
                Some(text) => text.parse::<jiff::Timestamp>().map_err(|e| {
                    Usage(format!(
                        "--as-of '{text}' is not an RFC 3339 time such as 2026-12-01T09:00:00Z: {e}"
                    ))
                })?,
                None => jiff::Timestamp::now(),
            };
            let study = Study::load(&study).map_err(|e| Usage(e.to_string()))?;
            let tally = batch::read(&study).map_err(|e| Usage(e.to_string()))?;
            let snapshot = assess::assess(&study, &tally, as_of);
            let text = match format {
                Format::Text => report::status_text(&snapshot),
                Format::Json => format!("{}\n", report::status_json(&snapshot)),
                Format::Csv => report::status_csv(&snapshot, &study.cells),
            };
            let code = if exit_code && !snapshot.ready_to_close {
                1
            } else {
                0
            };
            Ok(Done { text, code })
        }
    }
}

/// The study's event log, opened for appending, when it names one.
fn open_log(study: &Study) -> Result<Option<EventLog>, Usage> {
    match &study.log {
        Some(path) => EventLog::open(path, &study.source.file, &study.study_path)
            .map(Some)
            .map_err(|e| Usage(e.to_string())),
        None => Ok(None),
    }
}

/// Print lines, flushing. `Err` carries the exit code when standard output is gone:
/// 0 for a closed pipe (not an error), 1 for another failed write.
fn print(lines: &[String], err: &[String]) -> Result<(), u8> {
    for line in err {
        eprintln!("{line}");
    }
    let mut out = std::io::stdout().lock();
    let written = lines
        .iter()
        .try_for_each(|line| writeln!(out, "{line}"))
        .and_then(|()| out.flush());
    match written {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Err(0),
        Err(e) => {
            eprintln!("closeout: cannot write the output: {e}");
            Err(1)
        }
    }
}

/// `status --follow`: one loop over one channel of hints; the loop owns all state.
fn follow_status(
    study: Study,
    mut log: Option<EventLog>,
    json: bool,
    until_ready: bool,
    poll: bool,
    exit_code: bool,
) -> Done {
    let hints: Hints = Hints::start(&study.source.file, poll, hints::TICK);
    if let Some(e) = &hints.watch_error {
        eprintln!(
            "closeout: cannot watch the folder of the responses file ({e}): looking every second instead"
        );
    }
    let stop = hints.sender();
    if let Err(e) = ctrlc::set_handler(move || {
        let _ = stop.send(Hint::Stop);
    }) {
        eprintln!("closeout: cannot catch Ctrl-C ({e}); it will end the program at once");
    }
    let mut live = Live::new(study);
    let mut output = report::FollowOutput::new(json);
    let mut last_error: Option<String> = None;
    let mut last_log_error: Option<String> = None;
    let mut snapshot = assess::assess(live.study(), live.tally(), jiff::Timestamp::now());
    let mut hint = Some(Hint::File);
    loop {
        match hint {
            None | Some(Hint::Stop) => {
                let text = output.last_state(&snapshot);
                let code = match print(&[text], &[]) {
                    Ok(()) => u8::from(exit_code && !snapshot.ready_to_close),
                    Err(code) => code,
                };
                return Done {
                    text: String::new(),
                    code,
                };
            }
            Some(Hint::File | Hint::Tick) => {}
        }
        // Fold a burst of hints into one look; a stop waiting in it still counts.
        let mut stopping = false;
        while let Some(h) = hints.try_next() {
            stopping |= h == Hint::Stop;
        }
        let events = match live.poll() {
            Ok(events) => {
                last_error = None;
                events
            }
            Err(e) => {
                let message = format!("closeout: {e}");
                if last_error.as_deref() != Some(message.as_str()) {
                    eprintln!("{message}");
                    last_error = Some(message);
                }
                Vec::new()
            }
        };
        snapshot = assess::assess(live.study(), live.tally(), jiff::Timestamp::now());
        if let Some(l) = &mut log
            && let Err(e) = l.record(&events, &snapshot)
        {
            let message = format!("closeout: {e}");
            if last_log_error.as_deref() != Some(message.as_str()) {
                eprintln!("{message}");
                last_log_error = Some(message);
            }
        }
        let lines = output.update(&events, &snapshot);
        if let Err(code) = print(&lines.out, &lines.err) {
            return Done {
                text: String::new(),
                code,
            };
        }
        if until_ready && snapshot.ready_to_close {
            return Done {
                text: String::new(),
                code: 0,
            };
        }
        hint = if stopping {
            Some(Hint::Stop)
        } else if !live.caught_up() {
            Some(Hint::File)
        } else {
            hints.next()
        };
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(Done { text, code }) => {
            let mut out = std::io::stdout().lock();
            match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
                Ok(()) => ExitCode::from(code),
                Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::from(code),
                Err(e) => {
                    eprintln!("closeout: cannot write the output: {e}");
                    ExitCode::from(1)
                }
            }
        }
        Err(Usage(message)) => {
            eprintln!("closeout: {message}");
            ExitCode::from(2)
        }
    }
}
