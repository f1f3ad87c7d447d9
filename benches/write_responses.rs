//! Writes the benchmarks' responses files and study files (invented data):
//! `cargo bench --bench write_responses -- DIR ROWS...`. Used by `benches/batch.sh`.

#![allow(clippy::unwrap_used, clippy::expect_used)]

#[path = "support/responses.rs"]
mod responses;

fn main() {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| a != "--bench")
        .collect();
    let Some((dir, rows)) = args.split_first() else {
        eprintln!("usage: write_responses DIR ROWS...");
        std::process::exit(2);
    };
    for rows in rows {
        let rows: u64 = rows.replace('_', "").parse().expect("a row count");
        let (csv, with_ids, without) =
            responses::write_study(std::path::Path::new(dir), rows).expect("written");
        println!(
            "{} {} {}",
            csv.display(),
            with_ids.display(),
            without.display()
        );
    }
}
