//! closeout: follow survey fieldwork as responses arrive, keep a running proportion
//! per quota cell, and say how precise each one is under several probability bounds
//! and when collection can close.
//!
//! The modules follow the data flow: `rows` turns a CSV record into a response or a
//! rejection, `tally` keeps the running sums per cell and measure, and `bounds`
//! computes margins and sizes from counts.

pub mod bounds;
pub mod report;
pub mod rows;
pub mod tally;
