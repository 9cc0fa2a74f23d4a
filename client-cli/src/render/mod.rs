//! What commands print and write: reports as aligned tables, JSON or CSV ([`report`]), table
//! rows shared by commands ([`rows`]), and SVG/PNG charts ([`charts`] over [`plot`]).

pub mod charts;
pub mod plot;
pub mod report;
pub mod rows;
