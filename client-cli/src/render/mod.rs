//! What commands print and write: reports as aligned tables, JSON or CSV ([`report`]), table
//! rows shared by commands ([`rows`]), the report of each command's answer ([`calibration`], [`gas`],
//! [`screech`], [`spectra`], [`stages`], [`tracks`]), SVG/PNG charts ([`charts`] over [`plot`]), and the
//! spinner shown while the server works ([`progress`]).

pub mod calibration;
pub mod charts;
pub mod gas;
pub mod plot;
pub mod progress;
pub mod report;
pub mod rows;
pub mod screech;
pub mod spectra;
pub mod stages;
pub mod tracks;
