//! Argument groups shared by several commands, flattened into their `Args` structs: the jet
//! ([`jet`]), the recording and its calibration ([`input`], the per-microphone calibration file in
//! [`calibration_file`]), the group and channels of a TDMS
//! recording ([`tdms`]), and the spectral options ([`spectral`]). Each group also builds its
//! part of a request.

pub mod calibration_file;
pub mod input;
pub mod jet;
pub mod spectral;
pub mod tdms;
