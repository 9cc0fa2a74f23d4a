//! A reader for NI TDMS files (the documented "TDMS file format internal structure"): the
//! channels of a group with their properties, their samples decoded and scaled to engineering
//! units. Pure: no async, no server; the file is read through `Read + Seek`.
//!
//! The layout, as documented and followed here:
//! - the file is a run of segments; each starts with a 28-byte lead-in: the tag `TDSm`, the
//!   table-of-contents (ToC) flags (always little-endian), then in the segment's byte order the
//!   version (4712 or 4713), the offset of the next segment and the offset of the raw data (both
//!   u64, counted from the end of the lead-in; all ones for a segment whose writer stopped);
//! - the ToC flags: `kTocMetaData` (a metadata section follows), `kTocNewObjList` (the object
//!   list starts afresh; without it, the objects of the previous segment stay, in their order,
//!   and those named here are updated or appended), `kTocRawData`, `kTocInterleavedData`,
//!   `kTocBigEndian` (every number of the segment after the ToC), `kTocDAQmxRawData`;
//! - metadata: the number of objects, then per object its path (`/`, `/'group'`,
//!   `/'group'/'channel'`, a quote inside a name doubled), its raw data index (`0xFFFFFFFF`: no
//!   data in this segment; `0x00000000`: the same index as the object had before; `0x1269` /
//!   `0x126A`: DAQmx; else the index length, 20, or 28 for strings, then data type, array
//!   dimension 1, number of values, and for strings the total size in bytes) and its properties
//!   (name, data type, value);
//! - raw data: chunks one after the other, each holding, for every object with data in the
//!   segment in list order, its number of values (contiguous), or the values of all objects
//!   frame by frame (interleaved); the number of chunks is the raw data size over the chunk size.
//!
//! Channel data of types int8..int64, uint8..uint64, float32 and float64 (with or without unit)
//! are decoded; strings, booleans, timestamps, complex numbers and DAQmx raw data are refused
//! with a message naming the channel. Memory: the metadata and the samples of the channels asked
//! for (8 bytes a sample) plus a 1 MiB read buffer; other channels' data are skipped, never read.
//! Every error names the file, the byte offset where one applies, and what was expected.

mod data;
mod encoding;
mod layout;
mod scaling;

pub use encoding::Value;
pub use scaling::Linear;

use layout::Segment;
use std::collections::HashMap;
use std::fmt;
use std::io::BufReader;
use std::io::Read;
use std::io::Seek;
use std::path::Path;
use std::path::PathBuf;

/// A TDMS reading error: the file, the byte offset from the start of the file where one
/// applies, and what was found and expected.
#[derive(Debug, Clone, PartialEq)]
pub struct TdmsError {
    /// The file read.
    pub file: PathBuf,
    /// Byte offset in the file (bytes from its start) of the field at fault, if one is.
    pub offset: Option<u64>,
    /// What was found and what was expected.
    pub message: String,
}

impl fmt::Display for TdmsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.offset {
            Some(at) => write!(f, "{}: byte {at}: {}", self.file.display(), self.message),
            None => write!(f, "{}: {}", self.file.display(), self.message),
        }
    }
}

impl std::error::Error for TdmsError {}

/// An error at byte `offset` (bytes from the start of the file); the file is named by the caller.
pub(crate) fn at(offset: u64, message: impl Into<String>) -> TdmsError {
    TdmsError { file: PathBuf::new(), offset: Some(offset), message: message.into() }
}

/// An error about the file as a whole (no one byte offset).
pub(crate) fn whole(message: impl Into<String>) -> TdmsError {
    TdmsError { file: PathBuf::new(), offset: None, message: message.into() }
}

/// One object of the file (the root, a group or a channel) and its latest properties.
#[derive(Debug, Clone)]
pub(crate) struct Object {
    /// The path as written (`/'group'/'channel'`).
    pub(crate) path: String,
    /// Group name (None for the root).
    pub(crate) group: Option<String>,
    /// Channel name (None for the root and groups).
    pub(crate) channel: Option<String>,
    /// Properties in the order first seen; a later segment's value replaces an earlier one.
    pub(crate) properties: Vec<(String, Value)>,
}

impl Object {
    /// The property named `name`, if the object has it.
    pub(crate) fn property(&self, name: &str) -> Option<&Value> {
        self.properties.iter().find(|(n, _)| n == name).map(|(_, v)| v)
    }
}

/// What the file says about one channel.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelInfo {
    /// Group name.
    pub group: String,
    /// Channel name.
    pub name: String,
    /// TDMS data type code of its raw data (of the last segment where it has data; 0 when it
    /// has none).
    pub data_type: u32,
    /// Number of samples in the file.
    pub length: u64,
    /// Sample rate in Hz (1 / `wf_increment`), when the channel has that property.
    pub sample_rate_hz: Option<f64>,
    /// Unit of the scaled samples (`unit_string`, else `NI_UnitDescription`), when given.
    pub unit: Option<String>,
    /// The linear scaling raw -> engineering units the file carries (`NI_Scale[n]_Linear_*`),
    /// None for samples stored as they are; an error text for a scaling that cannot be applied.
    pub scaling: Result<Option<Linear>, String>,
    /// Index of the object in the file's object list.
    object: usize,
}

/// An open TDMS file: its objects, properties and segment layout, read once; samples are
/// read on request, for the channels asked only.
pub struct TdmsFile<R> {
    /// Where the bytes come from.
    src: R,
    /// The file's name for messages.
    path: PathBuf,
    /// Objects in order of first appearance.
    objects: Vec<Object>,
    /// Segments in file order.
    segments: Vec<Segment>,
    /// Samples per object, over all segments.
    lengths: Vec<u64>,
    /// Data type code per object (of the last segment where it has data; 0 if none).
    types: Vec<u32>,
    /// TDMS version of the first segment (4712 or 4713).
    version: u32,
    /// Things read but worth telling (a segment cut short, a partial last chunk).
    warnings: Vec<String>,
}

impl TdmsFile<BufReader<std::fs::File>> {
    /// Opens the file at `path` and reads its metadata (the raw data are skipped).
    ///
    /// # Errors
    /// [`TdmsError`] for a file that cannot be opened or does not follow the TDMS layout.
    pub fn open(path: &Path) -> Result<Self, TdmsError> {
        let f = std::fs::File::open(path).map_err(|e| TdmsError {
            file: path.to_path_buf(),
            offset: None,
            message: format!("cannot open it: {e}"),
        })?;
        Self::from_reader(path, BufReader::with_capacity(1 << 20, f))
    }
}

impl<R: Read + Seek> TdmsFile<R> {
    /// Reads the metadata of the TDMS bytes in `src`; `path` names them in messages.
    ///
    /// # Errors
    /// [`TdmsError`] for bytes that do not follow the TDMS layout.
    pub fn from_reader(path: &Path, mut src: R) -> Result<Self, TdmsError> {
        let named = |mut e: TdmsError| {
            e.file = path.to_path_buf();
            e
        };
        let scan = layout::scan(&mut src).map_err(named)?;
        let mut lengths = vec![0u64; scan.objects.len()];
        let mut types = vec![0u32; scan.objects.len()];
        for s in &scan.segments {
            for (k, o) in s.data_objects().enumerate() {
                lengths[o.object] = lengths[o.object].saturating_add(s.values_of(k, o));
                types[o.object] = Segment::index(o).data_type;
            }
        }
        Ok(Self {
            src,
            path: path.to_path_buf(),
            objects: scan.objects,
            segments: scan.segments,
            lengths,
            types,
            version: scan.version,
            warnings: scan.warnings,
        })
    }

    /// TDMS version of the file (4712 or 4713).
    pub fn version(&self) -> u32 {
        self.version
    }

    /// Number of segments.
    pub fn segment_count(&self) -> usize {
        self.segments.len()
    }

    /// Things read but worth telling (a segment cut short, a partial last chunk), each a
    /// sentence naming the file and byte offset.
    pub fn warnings(&self) -> Vec<String> {
        self.warnings.iter().map(|w| format!("{}: {w}", self.path.display())).collect()
    }

    /// Group names in the order they first appear (groups named only by a channel's path
    /// included).
    pub fn groups(&self) -> Vec<String> {
        let mut out: Vec<String> = Vec::new();
        for g in self.objects.iter().filter_map(|o| o.group.as_ref()) {
            if !out.contains(g) {
                out.push(g.clone());
            }
        }
        out
    }

    /// The channels of `group` in the order they first appear.
    pub fn channels(&self, group: &str) -> Vec<ChannelInfo> {
        let by_path: HashMap<Option<&str>, usize> = self
            .objects
            .iter()
            .enumerate()
            .filter(|(_, o)| o.channel.is_none())
            .map(|(i, o)| (o.group.as_deref(), i))
            .collect();
        let group_props = by_path.get(&Some(group)).map(|&i| &self.objects[i]);
        let root_props = by_path.get(&None).map(|&i| &self.objects[i]);
        self.objects
            .iter()
            .enumerate()
            .filter(|(_, o)| o.group.as_deref() == Some(group))
            .filter_map(|(i, o)| {
                let name = o.channel.clone()?;
                Some(ChannelInfo {
                    group: group.to_string(),
                    name,
                    data_type: self.types[i],
                    length: self.lengths[i],
                    sample_rate_hz: scaling::sample_rate_hz(o).ok().flatten(),
                    unit: scaling::unit(o),
                    scaling: scaling::linear(o, group_props, root_props),
                    object: i,
                })
            })
            .collect()
    }

    /// The sample rate of `channel` in Hz from its `wf_increment` property (seconds between
    /// samples), None without one.
    ///
    /// # Errors
    /// [`TdmsError`] for a `wf_increment` that is not a positive finite number.
    pub fn sample_rate_hz(&self, channel: &ChannelInfo) -> Result<Option<f64>, TdmsError> {
        scaling::sample_rate_hz(&self.objects[channel.object]).map_err(|m| self.named(whole(m)))
    }

    /// The properties of `channel`, in the order first seen.
    pub fn properties(&self, channel: &ChannelInfo) -> &[(String, Value)] {
        &self.objects[channel.object].properties
    }

    /// Reads the samples of `channels`, scaled to engineering units, one after the other
    /// (channel by channel, each `length` samples long).
    ///
    /// # Errors
    /// [`TdmsError`] for a channel whose scaling cannot be applied or whose data type is not
    /// int8..int64, uint8..uint64, float32 or float64, or raw data shorter than the metadata says.
    pub fn read_planar(&mut self, channels: &[ChannelInfo]) -> Result<Vec<f64>, TdmsError> {
        let objects: Vec<usize> = channels.iter().map(|c| c.object).collect();
        let lengths: Vec<u64> = objects.iter().map(|&o| self.lengths[o]).collect();
        let mut scales = Vec::with_capacity(channels.len());
        for c in channels {
            let s = c.scaling.clone().map_err(|m| {
                self.named(whole(format!("channel '{}' of group '{}': {m}", c.name, c.group)))
            })?;
            scales.push(s);
        }
        let path = self.path.clone();
        let named = |mut e: TdmsError| {
            e.file = path.clone();
            e
        };
        let mut out =
            data::read(&mut self.src, &self.segments, &self.objects, &objects, &lengths).map_err(named)?;
        let mut start = 0usize;
        for (len, s) in lengths.iter().zip(&scales) {
            let end = start + *len as usize;
            if let Some(s) = s {
                for v in &mut out[start..end] {
                    *v = s.apply(*v);
                }
            }
            start = end;
        }
        Ok(out)
    }

    /// `e` with this file's name.
    fn named(&self, mut e: TdmsError) -> TdmsError {
        e.file = self.path.clone();
        e
    }
}

/// A short name of a TDMS data type code, for messages and listings.
pub fn type_name(code: u32) -> String {
    encoding::type_name(code)
}

#[cfg(test)]
pub(crate) mod tests;
