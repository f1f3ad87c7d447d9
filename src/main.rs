//! The `closeout` command: argument parsing and exit codes; the library does the work.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use closeout::bounds::{self, Level, Query, SizeQuery};
use closeout::clock::Clock;
use closeout::event_log::EventLog;
use closeout::hints::{self, Hint, Hints};
use closeout::study::Study;
use closeout::{assess, batch, dashboard, demo, headless, report};

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
    /// Simulated fieldwork of an invented study, to watch the whole job work.
    Demo {
        /// Seed of the simulation: the same seed plays the same fieldwork.
        #[arg(long, default_value_t = demo::DEFAULT_SEED)]
        seed: u64,
        /// Simulated seconds per real second.
        #[arg(long, default_value_t = demo::DEFAULT_SPEED)]
        speed: f64,
        /// Folder for the demo's files: new or empty (default: a new temporary folder).
        #[arg(long)]
        dir: Option<PathBuf>,
        /// No waiting and no terminal: every file action in order, printing the
        /// verdict changes at their simulated moments.
        #[arg(long, conflicts_with_all = ["write", "speed"])]
        headless: bool,
        /// With --headless: stop before the first action after this simulated moment
        /// (RFC 3339), or this long after the start (such as 30h).
        #[arg(long, requires = "headless")]
        until: Option<String>,
        /// Only write the study and N responses into --dir, fast (for benchmarks).
        #[arg(long, value_name = "N", requires = "dir", conflicts_with = "speed")]
        write: Option<u64>,
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

/// The moment `--until` names: an RFC 3339 time, or a duration after `start`.
fn until_moment(text: &str, start: jiff::Timestamp) -> Result<jiff::Timestamp, Usage> {
    if let Ok(t) = text.parse::<jiff::Timestamp>() {
        return Ok(t);
    }
    text.parse::<jiff::SignedDuration>()
        .ok()
        .and_then(|d| start.checked_add(d).ok())
        .ok_or_else(|| {
            Usage(format!(
                "--until '{text}' is neither an RFC 3339 time such as 2026-03-03T12:00:00Z nor a duration such as 30h"
            ))
        })
}

/// `closeout demo`.
fn run_demo(
    seed: u64,
    speed: f64,
    dir: Option<PathBuf>,
    headless: bool,
    until: Option<String>,
    write: Option<u64>,
) -> Result<Done, Usage> {
    let usage = |e: demo::DemoError| Usage(e.to_string());
    if let Some(rows) = write {
        let dir = demo::fresh_dir(dir.as_deref()).map_err(usage)?;
        let began = std::time::Instant::now();
        let w = demo::bulk::write(&dir, rows, seed).map_err(usage)?;
        let text = format!(
            "wrote {} rows ({} bytes, about {} a row; {} malformed, {} repeated ids) of INVENTED data to {} in {:.1} s\nstudy: {}\n",
            w.rows,
            w.bytes,
            w.bytes / w.rows.max(1),
            w.malformed,
            w.duplicates,
            dir.join(demo::plan::RESPONSES).display(),
            began.elapsed().as_secs_f64(),
            dir.join("study.toml").display()
        );
        return Ok(Done { text, code: 0 });
    }
    if !(speed.is_finite() && speed > 0.0) {
        return Err(Usage(format!(
            "--speed '{speed}' must be a number above 0 (simulated seconds per real second)"
        )));
    }
    let plan = demo::plan(seed).map_err(|e| Usage(e.to_string()))?;
    let until = match until {
        Some(text) => Some(until_moment(&text, plan.start)?),
        None => None,
    };
    let dir = demo::fresh_dir(dir.as_deref()).map_err(usage)?;
    let demo = demo::prepare(&dir, plan).map_err(usage)?;
    let mut out = std::io::stdout();
    let intro = demo.introduction(if headless { None } else { Some(speed) });
    let code = if headless {
        let printed = headless::write_lines(&intro, &[], &mut out, &mut std::io::stderr())
            .and_then(|()| match demo::run_headless(&demo, until, &mut out) {
                Ok(_) => Ok(()),
                Err(demo::DemoError::Output(e)) if e.kind() == std::io::ErrorKind::BrokenPipe => {
                    Err(0)
                }
                Err(demo::DemoError::Output(e)) => {
                    eprintln!("closeout: cannot write the output: {e}");
                    Err(1)
                }
                Err(e) => {
                    eprintln!("closeout: {e}");
                    Err(2)
                }
            });
        printed.err().unwrap_or(0)
    } else {
        match headless::write_lines(&intro, &[], &mut out, &mut std::io::stderr()) {
            Ok(()) if std::io::stdout().is_terminal() => {
                match demo::watch(&demo, speed, dashboard::Theme::from_env(), stop_dashboard) {
                    Ok(closing) => {
                        headless::write_lines(&closing, &[], &mut out, &mut std::io::stderr())
                            .err()
                            .unwrap_or(0)
                    }
                    Err(e) => {
                        eprintln!("closeout: {e}");
                        1
                    }
                }
            }
            Ok(()) => {
                let hints = Hints::start(&demo.dir.join(demo::plan::RESPONSES), false, hints::TICK);
                stop_on_ctrl_c(&hints);
                demo::play(&demo, speed, &hints, &mut out, &mut std::io::stderr())
            }
            Err(code) => code,
        }
    };
    Ok(Done {
        text: String::new(),
        code,
    })
}

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
        Command::Demo {
            seed,
            speed,
            dir,
            headless,
            until,
            write,
        } => run_demo(seed, speed, dir, headless, until, write),
        Command::Watch { study, poll } => {
            let study = Study::load(&study).map_err(|e| Usage(e.to_string()))?;
            let log = open_log(&study)?;
            if !std::io::stdout().is_terminal() {
                let options = headless::FollowOptions::default();
                return Ok(follow_without_terminal(study, log, options, poll));
            }
            let options = dashboard::Options {
                clock: Clock::System,
                poll_only: poll,
                zone: jiff::tz::TimeZone::system(),
                theme: dashboard::Theme::from_env(),
            };
            match dashboard::run(study, log, options, stop_dashboard) {
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
                let options = headless::FollowOptions {
                    json,
                    until_ready,
                    exit_code,
                };
                return Ok(follow_without_terminal(study, log, options, poll));
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
            // Text and CSV show the deciding method only; JSON carries every method.
            let detail = match format {
                Format::Json => assess::Detail::EveryMethod,
                Format::Text | Format::Csv => assess::Detail::Verdict,
            };
            let snapshot =
                assess::assess_with(&study, &tally, as_of, study.target.decide_by, detail);
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

/// `status --follow`, and `watch` without a terminal: the library's follow loop on
/// the wall clock, stopped by Ctrl-C or SIGTERM.
fn follow_without_terminal(
    study: Study,
    log: Option<EventLog>,
    options: headless::FollowOptions,
    poll: bool,
) -> Done {
    let hints = Hints::start(&study.source.file, poll, hints::TICK);
    stop_on_ctrl_c(&hints);
    let code = headless::follow(
        study,
        log,
        options,
        &Clock::System,
        &hints,
        &mut std::io::stdout(),
        &mut std::io::stderr(),
    );
    Done {
        text: String::new(),
        code,
    }
}

/// Ctrl-C and SIGTERM send a stop on the hints' channel.
/// SIGTERM and SIGHUP end the dashboard as q does, restoring the terminal.
fn stop_dashboard(stop: std::sync::mpsc::Sender<dashboard::Event>) {
    if let Err(e) = ctrlc::set_handler(move || {
        let _ = stop.send(dashboard::Event::Stop);
    }) {
        eprintln!("closeout: cannot catch signals ({e}); a kill will leave the terminal as it is");
    }
}

fn stop_on_ctrl_c(hints: &Hints) {
    let stop = hints.sender();
    if let Err(e) = ctrlc::set_handler(move || {
        let _ = stop.send(Hint::Stop);
    }) {
        eprintln!("closeout: cannot catch Ctrl-C ({e}); it will end the program at once");
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
