//! Time per call of the margin engine: `interval` for every method at three sizes,
//! the first (unmemoised) call of the binomial margin, required sizes, the widest
//! margin search, and "how many more" (`more_needed`) for a cell not yet met. Run with `cargo bench --bench margins`.
//!
//! Each figure is the median over several runs of the time per call within a run; a
//! run repeats the call until it has taken about 20 ms, so fast calls are averaged over
//! many repetitions and slow ones are timed one call at a time (in 3 runs for a call
//! over a second).

#![allow(clippy::unwrap_used, clippy::expect_used)]

use std::hint::black_box;
use std::time::{Duration, Instant};

use closeout::bounds::{
    Level, Method, Query, SizeQuery, interval, more_needed, required_size, required_sizes,
    widest_margin,
};

/// Runs per figure; the median is reported.
const RUNS: usize = 9;
/// Runs for a call that takes over a second.
const SLOW_RUNS: usize = 3;
/// How long one run of a fast call lasts, about.
const RUN_TIME: Duration = Duration::from_millis(20);

fn median(mut xs: Vec<f64>) -> f64 {
    xs.sort_by(f64::total_cmp);
    xs[xs.len() / 2]
}

/// The median time per call of `f`, in seconds.
fn per_call(mut f: impl FnMut()) -> f64 {
    // Calibrate: double the repetitions until a batch takes at least RUN_TIME.
    let mut reps: u64 = 1;
    let batch = loop {
        let start = Instant::now();
        for _ in 0..reps {
            f();
        }
        let batch = start.elapsed();
        if batch >= RUN_TIME || reps >= 1 << 30 {
            break batch;
        }
        reps *= 2;
    };
    // A call that alone takes over a second is timed in fewer runs.
    let runs = if batch > Duration::from_secs(1) {
        SLOW_RUNS
    } else {
        RUNS
    };
    let times = (0..runs)
        .map(|_| {
            let start = Instant::now();
            for _ in 0..reps {
                f();
            }
            start.elapsed().as_secs_f64() / reps as f64
        })
        .collect();
    median(times)
}

/// Seconds in the unit that suits them.
fn show(seconds: f64) -> String {
    if seconds < 1e-6 {
        format!("{:.0} ns", seconds * 1e9)
    } else if seconds < 1e-3 {
        format!("{:.2} µs", seconds * 1e6)
    } else if seconds < 1.0 {
        format!("{:.2} ms", seconds * 1e3)
    } else {
        format!("{seconds:.2} s")
    }
}

fn main() {
    let level = Level::from_confidence(0.95).expect("valid level");
    let cases: [(u64, u64); 3] = [(81, 263), (500, 1000), (5000, 10000)];

    println!("interval(method, S, n) at 95 %, time per call (median of {RUNS} runs)");
    print!("{:<26}", "method");
    for (s, n) in cases {
        print!("{:>16}", format!("({s}, {n})"));
    }
    println!();
    for method in Method::ALL {
        print!("{:<26}", method.name());
        for (s, n) in cases {
            let q = Query::new(s, n, level).expect("valid query");
            // The first call fills the binomial memo; the figure is the steady state.
            let _ = interval(method, &q);
            let t = per_call(|| {
                let _ = black_box(interval(black_box(method), black_box(&q)));
            });
            print!("{:>16}", show(t));
        }
        println!();
    }

    // The binomial margin is memoised per (n, δ): time a first call at a fresh n.
    print!("{:<26}", "binomial, first call");
    for (s, n) in cases {
        let times = (1..=RUNS as u64)
            .map(|i| {
                let q = Query::new(s, n + i, level).expect("valid query");
                let start = Instant::now();
                let _ = black_box(interval(Method::Binomial, black_box(&q)));
                start.elapsed().as_secs_f64()
            })
            .collect();
        print!("{:>16}", show(median(times)));
    }
    println!("   (n + 1 … n + {RUNS}, each new)");
    println!();

    println!("sizes and searches at 95 %, time per call");
    for eps in [0.01, 0.03] {
        let sq = SizeQuery::new(eps, level).expect("valid size query");
        let size = required_size(Method::Binomial, &sq).expect("available");
        let t = per_call(|| {
            let _ = black_box(required_size(Method::Binomial, black_box(&sq)));
        });
        println!(
            "{:<42}{:>12}   (n = {}, every larger n from {})",
            format!("required_size(binomial, ε = {eps})"),
            show(t),
            size.n,
            size.n_all_larger.unwrap_or(size.n)
        );
    }
    let sq = SizeQuery::new(0.01, level).expect("valid size query");
    let t = per_call(|| {
        let _ = black_box(required_sizes(black_box(&sq)));
    });
    println!(
        "{:<42}{:>12}",
        "required_sizes(every method, ε = 0.01)",
        show(t)
    );
    let widest = widest_margin(Method::ClopperPearson, 10_000, level, None).expect("available");
    let t = per_call(|| {
        let _ = black_box(widest_margin(
            Method::ClopperPearson,
            black_box(10_000),
            level,
            None,
        ));
    });
    println!(
        "{:<42}{:>12}   (margin {widest:.6})",
        "widest_margin(clopper-pearson, n = 10000)",
        show(t)
    );

    println!();
    println!(
        "more_needed(method, S = 300, n = 1000, ±1 %) at 95 %, tuned for 10,000, time per call"
    );
    for method in [
        Method::Anytime,
        Method::Wilson,
        Method::Hoeffding,
        Method::ClopperPearson,
    ] {
        for population in [None, Some(200_000)] {
            let mut q = Query::new(300, 1000, level)
                .and_then(|q| q.with_tune_for(10_000))
                .expect("valid query");
            if let Some(total) = population {
                q = q.with_population(total).expect("valid population");
            }
            let more = more_needed(method, &q, 0.01).expect("available");
            let t = per_call(|| {
                let _ = black_box(more_needed(black_box(method), black_box(&q), 0.01));
            });
            let label = match population {
                Some(total) => format!("{method}, population {total}"),
                None => method.name().to_string(),
            };
            println!("{label:<42}{:>12}   ({more:?} more)", show(t));
        }
    }
}
