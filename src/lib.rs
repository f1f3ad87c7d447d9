//! closeout: follow survey fieldwork as responses arrive, keep a running proportion
//! per quota cell, and say how precise each one is under several probability bounds
//! and when collection can close.
//!
//! The modules follow the data flow: `study` reads and checks the study file;
//! `follow` hands out the complete records of a growing file exactly once, and `live`
//! counts them into a tally that always equals a fresh read; `hints` turns file
//! events and a safety tick into one channel; `rows`
//! turns a CSV record into a response or a rejection; `tally` keeps the running sums
//! per cell and measure; `batch` reads a whole file once; `bounds` computes margins
//! and sizes from counts; `assess` turns a study and its tally into a `Snapshot`;
//! `report` writes a snapshot (or a margin or size question) as text, JSON or CSV;
//! `event_log` appends what changed, and when, to the study's event log; `clock` is
//! the injected "now" (the wall clock, a fixed moment, or the demo's simulated time);
//! `headless` is the follow loop without a terminal (`status --follow`); `demo` is
//! the simulated fieldwork of an invented study (`closeout demo`).

pub mod assess;
pub mod batch;
pub mod bounds;
pub mod clock;
pub mod dashboard;
pub mod demo;
pub mod event_log;
pub mod follow;
pub mod headless;
pub mod hints;
pub mod live;
mod parallel;
pub mod report;
pub mod rows;
pub mod study;
pub mod tally;
