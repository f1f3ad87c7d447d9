//! closeout: follow survey fieldwork as responses arrive, keep a running proportion
//! per quota cell, and say how precise each one is under several probability bounds
//! and when collection can close.
//!
//! The modules follow the data flow: `bounds` computes margins and sizes from counts;
//! `study` reads and checks the study file; `rows` turns a record into a response.

pub mod bounds;
pub mod report;
pub mod rows;
pub mod study;
