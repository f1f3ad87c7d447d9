//! The `closeout` command: argument parsing and exit codes; the library does the work.

use std::io::Write;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use closeout::bounds::{self, Level, Query, SizeQuery};
use closeout::report;

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
}

/// An error in what the user asked for: exit code 2.
struct Usage(String);

fn run(cli: Cli) -> Result<String, Usage> {
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
            Ok(if json {
                format!("{}\n", report::margin_json(&q, &rows))
            } else {
                report::margin_text(&q, &rows)
            })
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
            Ok(if json {
                format!("{}\n", report::size_json(&sq, &rows))
            } else {
                report::size_text(&sq, &rows)
            })
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(text) => {
            let mut out = std::io::stdout().lock();
            match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::SUCCESS,
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
