//! The TDMS layout: lead-ins, metadata (object lists, raw data indexes, properties) and the
//! chunk arithmetic of each segment. The raw data themselves are read by [`super::data`].

use super::at;
use super::encoding::parse_path;
use super::encoding::read_at;
use super::encoding::type_name;
use super::encoding::type_size;
use super::encoding::Cursor;
use super::whole;
use super::Object;
use super::TdmsError;
use std::collections::HashMap;
use std::io::Read;
use std::io::Seek;
use std::io::SeekFrom;
use std::rc::Rc;

/// ToC flag: the segment has a metadata section.
pub(crate) const K_TOC_META_DATA: u32 = 1 << 1;
/// ToC flag: the object list starts afresh.
pub(crate) const K_TOC_NEW_OBJ_LIST: u32 = 1 << 2;
/// ToC flag: the segment has raw data.
pub(crate) const K_TOC_RAW_DATA: u32 = 1 << 3;
/// ToC flag: the raw data are interleaved (frame by frame).
pub(crate) const K_TOC_INTERLEAVED_DATA: u32 = 1 << 5;
/// ToC flag: the numbers of the segment after the ToC are big-endian.
pub(crate) const K_TOC_BIG_ENDIAN: u32 = 1 << 6;
/// ToC flag: the segment holds DAQmx raw data.
pub(crate) const K_TOC_DAQMX_RAW_DATA: u32 = 1 << 7;
/// Raw data index: no data for the object in this segment.
const INDEX_NO_DATA: u32 = 0xFFFF_FFFF;
/// Raw data index: the same index as the object had in an earlier segment.
const INDEX_SAME_AS_PREVIOUS: u32 = 0;
/// Raw data index headers of DAQmx data (format-changing scaler, digital line scaler).
const INDEX_DAQMX: [u32; 2] = [0x0000_1269, 0x0000_126A];
/// Lead-in size in bytes.
pub(crate) const LEAD_IN: u64 = 28;
/// TDMS string data type code.
const TYPE_STRING: u32 = 0x20;

/// The raw data index of an object in a segment.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Index {
    /// Data type code.
    pub(crate) data_type: u32,
    /// Values per chunk.
    pub(crate) values: u64,
    /// Bytes per chunk.
    pub(crate) bytes: u64,
}

/// An object in a segment's list.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct SegObject {
    /// Index in the file's object list.
    pub(crate) object: usize,
    /// Its latest raw data index (kept while it has no data, for a later "same as previous").
    pub(crate) index: Option<Index>,
    /// It has data in this segment.
    pub(crate) has_data: bool,
}

/// A segment: where its raw data lie and how they are cut into chunks.
#[derive(Debug, Clone)]
pub(crate) struct Segment {
    /// Byte offset of the lead-in.
    pub(crate) start: u64,
    /// Byte offset of the raw data.
    pub(crate) data_start: u64,
    /// Numbers are big-endian.
    pub(crate) big_endian: bool,
    /// Raw data are interleaved.
    pub(crate) interleaved: bool,
    /// The object list (shared with the segments that reuse it).
    pub(crate) objects: Rc<Vec<SegObject>>,
    /// Bytes per chunk.
    pub(crate) chunk_bytes: u64,
    /// Whole chunks.
    pub(crate) chunks: u64,
    /// Values per data object in a partial last chunk, if the raw data end in one.
    pub(crate) last: Option<Vec<u64>>,
}

impl Segment {
    /// The objects with data in this segment, in chunk order.
    pub(crate) fn data_objects(&self) -> impl Iterator<Item = &SegObject> {
        self.objects.iter().filter(|o| o.has_data)
    }

    /// The index of data object `o` (objects with data always have one).
    pub(crate) fn index(o: &SegObject) -> Index {
        o.index.unwrap_or(Index { data_type: 0, values: 0, bytes: 0 })
    }

    /// Values in the whole segment of `o`, the `k`-th data object.
    pub(crate) fn values_of(&self, k: usize, o: &SegObject) -> u64 {
        let per_chunk = Self::index(o).values;
        let last = self.last.as_ref().and_then(|l| l.get(k)).copied().unwrap_or(0);
        per_chunk.saturating_mul(self.chunks).saturating_add(last)
    }
}

/// What a scan of the file found.
pub(crate) struct Scan {
    /// Objects in order of first appearance.
    pub(crate) objects: Vec<Object>,
    /// Segments in file order.
    pub(crate) segments: Vec<Segment>,
    /// Version of the first segment.
    pub(crate) version: u32,
    /// Warnings (without the file name).
    pub(crate) warnings: Vec<String>,
}

/// Reads every lead-in and metadata section of `src`, skipping the raw data.
pub(crate) fn scan<R: Read + Seek>(src: &mut R) -> Result<Scan, TdmsError> {
    let size = src.seek(SeekFrom::End(0)).map_err(|e| whole(format!("cannot read it: {e}")))?;
    let mut state = State::default();
    let mut segments: Vec<Segment> = Vec::new();
    let mut version = 0;
    let mut pos = 0u64;
    if size == 0 {
        return Err(at(0, "empty file, expected a TDMS segment starting with TDSm"));
    }
    while pos < size {
        if size - pos < LEAD_IN {
            state.warnings.push(format!(
                "byte {pos}: {} trailing bytes, fewer than a 28-byte lead-in: ignored",
                size - pos
            ));
            break;
        }
        let mut lead = [0u8; LEAD_IN as usize];
        read_at(src, pos, &mut lead)?;
        if &lead[..4] != b"TDSm" {
            return Err(at(
                pos,
                format!("segment tag {:?}, expected \"TDSm\"", String::from_utf8_lossy(&lead[..4])),
            ));
        }
        let toc = u32::from_le_bytes([lead[4], lead[5], lead[6], lead[7]]);
        let big = toc & K_TOC_BIG_ENDIAN != 0;
        let mut c = Cursor { buf: &lead, pos: 8, base: pos, big };
        let v = c.u32("version")?;
        if v != 4712 && v != 4713 {
            return Err(at(pos + 8, format!("TDMS version {v}, expected 4712 or 4713")));
        }
        if version == 0 {
            version = v;
        }
        let next_offset = c.u64("next segment offset")?;
        let raw_offset = c.u64("raw data offset")?;
        let meta_start = pos + LEAD_IN;
        let (data_end, cut) = match meta_start.checked_add(next_offset) {
            Some(end) if next_offset != u64::MAX && end <= size => (end, false),
            _ => (size, true),
        };
        if cut {
            state.warnings.push(format!(
                "byte {}: segment says its next segment is {} bytes on, but the file ends at byte {size}: \
                 read as far as it goes",
                pos + 12,
                if next_offset == u64::MAX {
                    "unknown (all ones)".to_string()
                } else {
                    next_offset.to_string()
                }
            ));
        }
        let data_start = match meta_start.checked_add(raw_offset) {
            Some(d) if d <= data_end => d,
            _ if cut => {
                state.warnings.push(format!("byte {pos}: segment ends inside its metadata: ignored"));
                break;
            }
            _ => {
                return Err(at(
                    pos + 20,
                    format!("raw data offset {raw_offset} is beyond the next segment offset {next_offset}"),
                ))
            }
        };
        if toc & K_TOC_DAQMX_RAW_DATA != 0 && toc & K_TOC_RAW_DATA != 0 {
            return Err(at(
                pos + 4,
                "segment holds DAQmx raw data (ToC flag kTocDAQmxRawData), which this reader does not \
                 decode: save the channels as scaled data (int or float) instead",
            ));
        }
        let objects = if toc & K_TOC_META_DATA != 0 {
            let len = (data_start - meta_start) as usize;
            let mut buf = vec![0u8; len];
            read_at(src, meta_start, &mut buf)?;
            let prev =
                if toc & K_TOC_NEW_OBJ_LIST != 0 { None } else { segments.last().map(|s| &*s.objects) };
            let mut c = Cursor { buf: &buf, pos: 0, base: meta_start, big };
            Rc::new(state.metadata(&mut c, prev)?)
        } else {
            match segments.last() {
                Some(s) => Rc::clone(&s.objects),
                None => {
                    return Err(at(
                        pos + 4,
                        "the first segment has no metadata (ToC flag kTocMetaData unset): expected the object list",
                    ))
                }
            }
        };
        let raw = if toc & K_TOC_RAW_DATA != 0 { data_end - data_start } else { 0 };
        segments.push(chunks(pos, data_start, raw, toc, objects, cut, &mut state.warnings)?);
        if cut {
            break;
        }
        pos = data_end;
    }
    Ok(Scan { objects: state.objects, segments, version, warnings: state.warnings })
}

/// The chunk arithmetic of a segment with `raw` bytes of raw data from `data_start`.
fn chunks(
    start: u64,
    data_start: u64,
    raw: u64,
    toc: u32,
    objects: Rc<Vec<SegObject>>,
    cut: bool,
    warnings: &mut Vec<String>,
) -> Result<Segment, TdmsError> {
    let data: Vec<Index> = objects.iter().filter(|o| o.has_data).map(Segment::index).collect();
    let chunk_bytes = data.iter().try_fold(0u64, |a, i| a.checked_add(i.bytes));
    let chunk_bytes = chunk_bytes.ok_or_else(|| at(start, "chunk size overflows 64 bits"))?;
    let unsized_count = data.iter().filter(|i| type_size(i.data_type).is_none()).count();
    let mut interleaved = toc & K_TOC_INTERLEAVED_DATA != 0;
    if interleaved && unsized_count > 0 {
        if data.len() == 1 {
            interleaved = false; // one string channel: read as contiguous
        } else {
            return Err(at(
                start + 4,
                "interleaved segment with string data: expected fixed-size types only",
            ));
        }
    }
    if interleaved && data.windows(2).any(|w| w[0].values != w[1].values) {
        return Err(at(
            start + 4,
            format!(
                "interleaved segment whose objects have different numbers of values per chunk ({}): \
                 expected the same number for every object",
                data.iter().map(|i| i.values.to_string()).collect::<Vec<_>>().join(", ")
            ),
        ));
    }
    let mut seg = Segment {
        start,
        data_start,
        big_endian: toc & K_TOC_BIG_ENDIAN != 0,
        interleaved,
        objects,
        chunk_bytes,
        chunks: 0,
        last: None,
    };
    if chunk_bytes == 0 {
        if raw != 0 {
            return Err(at(
                data_start,
                format!("{raw} bytes of raw data but the objects' indexes give a chunk of 0 bytes"),
            ));
        }
        return Ok(seg);
    }
    seg.chunks = raw / chunk_bytes;
    let rest = raw % chunk_bytes;
    if rest != 0 {
        warnings.push(format!(
            "byte {data_start}: {raw} bytes of raw data are not a whole number of {chunk_bytes}-byte chunks: \
             the last {rest} bytes are read as a partial chunk"
        ));
        let mut last = Vec::with_capacity(data.len());
        if unsized_count > 0 {
            last.resize(data.len(), 0);
        } else if interleaved || !cut {
            // Spread over the objects in proportion (as a writer that stopped mid-chunk would).
            for i in &data {
                last.push(((i.values as u128 * rest as u128) / chunk_bytes as u128) as u64);
            }
        } else {
            // A contiguous chunk cut short: objects are filled in order.
            let mut left = rest;
            for i in &data {
                let size = type_size(i.data_type).unwrap_or(1);
                let n = (left / size).min(i.values);
                last.push(n);
                left -= n * size;
            }
        }
        seg.last = Some(last);
    }
    Ok(seg)
}

/// The object list and properties as the metadata sections build them up.
#[derive(Default)]
struct State {
    /// Objects in order of first appearance.
    objects: Vec<Object>,
    /// Object index by path.
    by_path: HashMap<String, usize>,
    /// The latest raw data index of each object, for "same as previous".
    last_index: Vec<Option<Index>>,
    /// Warnings.
    warnings: Vec<String>,
}

impl State {
    /// Reads a metadata section: the segment's object list (from `prev` unless it starts
    /// afresh) and the properties, updated in place.
    fn metadata(
        &mut self,
        c: &mut Cursor,
        prev: Option<&Vec<SegObject>>,
    ) -> Result<Vec<SegObject>, TdmsError> {
        let mut list: Vec<SegObject> = prev.cloned().unwrap_or_default();
        let count = c.u32("number of objects")?;
        for _ in 0..count {
            let path_at = c.offset();
            let path = c.string("object path")?;
            let id = self.object(&path, path_at)?;
            let header_at = c.offset();
            let header = c.u32("raw data index")?;
            let in_list = list.iter().position(|o| o.object == id);
            let known = in_list.and_then(|k| list[k].index).or(self.last_index[id]);
            let entry = match header {
                INDEX_NO_DATA => SegObject { object: id, index: known, has_data: false },
                INDEX_SAME_AS_PREVIOUS => match known {
                    Some(ix) => SegObject { object: id, index: Some(ix), has_data: true },
                    None => {
                        return Err(at(
                            header_at,
                            format!(
                                "object {path}: raw data index 0x00000000 (same as previous) but the object \
                                 had no index before: expected its index"
                            ),
                        ))
                    }
                },
                h if INDEX_DAQMX.contains(&h) => {
                    return Err(at(
                        header_at,
                        format!(
                            "object {path}: DAQmx raw data index (0x{h:08X}), which this reader does not \
                             decode: save the channels as scaled data (int or float) instead"
                        ),
                    ))
                }
                len => {
                    let ix = Self::index(c, &path, len, header_at)?;
                    self.last_index[id] = Some(ix);
                    SegObject { object: id, index: Some(ix), has_data: ix.values > 0 || ix.bytes > 0 }
                }
            };
            match in_list {
                Some(k) => list[k] = entry,
                None => list.push(entry),
            }
            let n = c.u32("number of properties")?;
            for _ in 0..n {
                let name_at = c.offset();
                let name = c.string("property name")?;
                let value = c.value(&name, name_at)?;
                let props = &mut self.objects[id].properties;
                match props.iter_mut().find(|(k, _)| *k == name) {
                    Some(p) => p.1 = value,
                    None => props.push((name, value)),
                }
            }
        }
        Ok(list)
    }

    /// A raw data index of `len` bytes (20, or 28 for strings) after its length field.
    fn index(c: &mut Cursor, path: &str, len: u32, header_at: u64) -> Result<Index, TdmsError> {
        let type_at = c.offset();
        let data_type = c.u32("data type")?;
        let expected = if data_type == TYPE_STRING { 28 } else { 20 };
        if len != expected {
            return Err(at(
                header_at,
                format!(
                    "object {path}: raw data index length {len} (0x{len:08X}), expected {expected} for {} data, \
                     0xFFFFFFFF (no data) or 0x00000000 (same as previous)",
                    type_name(data_type)
                ),
            ));
        }
        let dim_at = c.offset();
        let dimension = c.u32("array dimension")?;
        if dimension != 1 {
            return Err(at(dim_at, format!("object {path}: array dimension {dimension}, expected 1")));
        }
        let values = c.u64("number of values")?;
        let bytes = if data_type == TYPE_STRING {
            c.u64("total size in bytes")?
        } else if values == 0 {
            0
        } else {
            let size = type_size(data_type).ok_or_else(|| {
                at(
                    type_at,
                    format!(
                        "object {path}: raw data of type {}, whose size this reader does not know",
                        type_name(data_type)
                    ),
                )
            })?;
            values.checked_mul(size).ok_or_else(|| {
                at(type_at + 8, format!("object {path}: {values} values overflow 64 bits of bytes"))
            })?
        };
        Ok(Index { data_type, values, bytes })
    }

    /// The index of the object at `path`, added if new.
    fn object(&mut self, path: &str, path_at: u64) -> Result<usize, TdmsError> {
        if let Some(&i) = self.by_path.get(path) {
            return Ok(i);
        }
        let (group, channel) =
            parse_path(path).map_err(|m| at(path_at, format!("object path {path:?}: {m}")))?;
        self.objects.push(Object { path: path.to_string(), group, channel, properties: Vec::new() });
        self.last_index.push(None);
        self.by_path.insert(path.to_string(), self.objects.len() - 1);
        Ok(self.objects.len() - 1)
    }
}
