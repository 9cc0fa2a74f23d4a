//! Raw data of the channels asked for: contiguous chunks (each channel's values one block)
//! and interleaved chunks (frame by frame), in either byte order, decoded to f64. Only the
//! bytes of the channels asked are read from contiguous chunks; interleaved chunks are read
//! frame by frame in blocks of at most 1 MiB.

use super::at;
use super::encoding::type_name;
use super::encoding::type_size;
use super::layout::SegObject;
use super::layout::Segment;
use super::Object;
use super::TdmsError;
use std::collections::HashMap;
use std::io::Read;
use std::io::Seek;
use std::io::SeekFrom;

/// Bytes read at once.
const BLOCK: usize = 1 << 20;

/// The samples of `wanted` (indexes in the object list), one channel after the other, each
/// `lengths[k]` long, from the raw data of `segments`.
pub(crate) fn read<R: Read + Seek>(
    src: &mut R,
    segments: &[Segment],
    objects: &[Object],
    wanted: &[usize],
    lengths: &[u64],
) -> Result<Vec<f64>, TdmsError> {
    let total = lengths.iter().try_fold(0usize, |a, &n| a.checked_add(usize::try_from(n).ok()?));
    let total = total.ok_or_else(|| super::whole("more samples than this machine can address"))?;
    // Every segment's data type of the channels asked is checked before memory is taken.
    let asked: std::collections::HashSet<usize> = wanted.iter().copied().collect();
    for seg in segments {
        for o in seg.data_objects().filter(|o| asked.contains(&o.object)) {
            let code = Segment::index(o).data_type;
            if !decodable(code) {
                return Err(at(
                    seg.start,
                    format!(
                        "channel {} holds {} data in this segment: expected int8..int64, uint8..uint64, \
                         float32 or float64",
                        objects[o.object].path,
                        type_name(code)
                    ),
                ));
            }
        }
    }
    let mut out = Vec::new();
    out.try_reserve_exact(total).map_err(|_| {
        super::whole(format!("{total} samples ({} MiB) do not fit in memory", total / (1 << 17)))
    })?;
    out.resize(total, 0f64);
    // Where the next value of each wanted channel goes.
    let mut next: Vec<usize> = lengths
        .iter()
        .scan(0usize, |acc, &n| {
            let start = *acc;
            *acc += n as usize;
            Some(start)
        })
        .collect();
    let ends: Vec<usize> = next.iter().zip(lengths).map(|(s, &n)| s + n as usize).collect();
    let mut buf = Vec::new();
    let start = src.stream_position().map_err(|e| super::whole(format!("cannot read it: {e}")))?;
    let mut src = Walker { src, pos: start };
    // (position among the data objects, which wanted channel) for the wanted ones present,
    // worked out again only when the object list changes.
    let mut here: Vec<(usize, usize)> = Vec::new();
    let mut list: Option<&std::rc::Rc<Vec<SegObject>>> = None;
    for seg in segments {
        let data: Vec<_> = seg.data_objects().collect();
        if !list.is_some_and(|l| std::rc::Rc::ptr_eq(l, &seg.objects)) {
            let at_k: HashMap<usize, usize> = data.iter().enumerate().map(|(k, o)| (o.object, k)).collect();
            here = wanted.iter().enumerate().filter_map(|(w, obj)| Some((*at_k.get(obj)?, w))).collect();
            here.sort_unstable(); // file order, so that reads move forward
            list = Some(&seg.objects);
        }
        if here.is_empty() || seg.chunk_bytes == 0 {
            continue;
        }
        let full: Vec<u64> = data.iter().map(|o| Segment::index(o).values).collect();
        let chunk_count = seg.chunks + u64::from(seg.last.is_some());
        for c in 0..chunk_count {
            let counts = if c < seg.chunks { &full } else { seg.last.as_ref().unwrap_or(&full) };
            let chunk_start = seg.data_start + c * seg.chunk_bytes;
            let mut sink = Sink { out: &mut out, next: &mut next, ends: &ends };
            if seg.interleaved {
                interleaved(&mut src, seg, &data, counts, chunk_start, &here, &mut sink, &mut buf)?;
            } else {
                contiguous(&mut src, seg, &data, counts, chunk_start, &here, &mut sink, &mut buf)?;
            }
        }
    }
    Ok(out)
}

/// A reader that knows its position, so that moving forward stays inside its buffer when it
/// can (`seek_relative`).
struct Walker<'a, R> {
    /// The bytes.
    src: &'a mut R,
    /// Current byte offset.
    pos: u64,
}

impl<R: Read + Seek> Walker<'_, R> {
    /// Moves to byte `to`.
    fn goto(&mut self, to: u64) -> Result<(), TdmsError> {
        if to != self.pos {
            let delta = to as i128 - self.pos as i128;
            let r = match i64::try_from(delta) {
                Ok(d) => self.src.seek_relative(d),
                Err(_) => self.src.seek(SeekFrom::Start(to)).map(|_| ()),
            };
            r.map_err(|e| at(to, format!("cannot seek there: {e}")))?;
            self.pos = to;
        }
        Ok(())
    }

    /// Fills `buf` from the current position.
    fn fill(&mut self, buf: &mut [u8]) -> Result<(), TdmsError> {
        self.src
            .read_exact(buf)
            .map_err(|e| at(self.pos, format!("raw data: cannot read {} bytes there: {e}", buf.len())))?;
        self.pos += buf.len() as u64;
        Ok(())
    }
}

/// Where decoded values go.
struct Sink<'a> {
    /// All channels, one after the other.
    out: &'a mut [f64],
    /// Next position of each wanted channel.
    next: &'a mut [usize],
    /// End of each wanted channel.
    ends: &'a [usize],
}

impl Sink<'_> {
    /// The next `n` slots of wanted channel `w`.
    fn slots(&mut self, w: usize, n: usize, offset: u64) -> Result<&mut [f64], TdmsError> {
        let start = self.next[w];
        if start + n > self.ends[w] {
            return Err(at(offset, "more raw data than the metadata announced for this channel"));
        }
        self.next[w] += n;
        Ok(&mut self.out[start..start + n])
    }
}

/// Data types decoded as channel data.
fn decodable(code: u32) -> bool {
    matches!(code, 1..=10 | 0x19 | 0x1A)
}

/// A contiguous chunk: each wanted channel's block of values, read where it lies.
#[allow(clippy::too_many_arguments)]
fn contiguous<R: Read + Seek>(
    src: &mut Walker<R>,
    seg: &Segment,
    data: &[&SegObject],
    counts: &[u64],
    chunk_start: u64,
    here: &[(usize, usize)],
    sink: &mut Sink,
    buf: &mut Vec<u8>,
) -> Result<(), TdmsError> {
    // Offsets of each data object within this chunk (its values * size before it).
    let mut offsets = Vec::with_capacity(data.len());
    let mut off = 0u64;
    for (o, &n) in data.iter().zip(counts) {
        offsets.push(off);
        let ix = Segment::index(o);
        off += if n == ix.values { ix.bytes } else { n * type_size(ix.data_type).unwrap_or(0) };
    }
    for &(k, w) in here {
        let code = Segment::index(data[k]).data_type;
        let size = type_size(code).unwrap_or(1) as usize;
        let mut left = counts[k] as usize;
        src.goto(chunk_start + offsets[k])?;
        while left > 0 {
            let (n, pos) = (left.min(BLOCK / size), src.pos);
            buf.resize(n * size, 0);
            src.fill(buf)?;
            decode(code, seg.big_endian, buf, sink.slots(w, n, pos)?);
            left -= n;
        }
    }
    Ok(())
}

/// An interleaved chunk: frames of one value of every data object, read in blocks.
#[allow(clippy::too_many_arguments)]
fn interleaved<R: Read + Seek>(
    src: &mut Walker<R>,
    seg: &Segment,
    data: &[&SegObject],
    counts: &[u64],
    chunk_start: u64,
    here: &[(usize, usize)],
    sink: &mut Sink,
    buf: &mut Vec<u8>,
) -> Result<(), TdmsError> {
    let sizes: Vec<usize> =
        data.iter().map(|o| type_size(Segment::index(o).data_type).unwrap_or(0) as usize).collect();
    let width: usize = sizes.iter().sum();
    let column: Vec<usize> = sizes
        .iter()
        .scan(0, |a, s| {
            let c = *a;
            *a += s;
            Some(c)
        })
        .collect();
    let frames = counts.first().copied().unwrap_or(0) as usize;
    let per_block = (BLOCK / width.max(1)).max(1);
    src.goto(chunk_start)?;
    let mut done = 0;
    let mut value = Vec::new();
    while done < frames {
        let (n, pos) = (per_block.min(frames - done), src.pos);
        buf.resize(n * width, 0);
        src.fill(buf)?;
        for &(k, w) in here {
            let (code, size) = (Segment::index(data[k]).data_type, sizes[k]);
            value.clear();
            for f in 0..n {
                let s = f * width + column[k];
                value.extend_from_slice(&buf[s..s + size]);
            }
            decode(code, seg.big_endian, &value, sink.slots(w, n, pos)?);
        }
        done += n;
    }
    Ok(())
}

/// Decodes `bytes` of data type `code` into `out` (one value per slot).
fn decode(code: u32, big: bool, bytes: &[u8], out: &mut [f64]) {
    macro_rules! each {
        ($t:ty, $n:expr) => {
            for (o, b) in out.iter_mut().zip(bytes.chunks_exact($n)) {
                let mut a = [0u8; $n];
                a.copy_from_slice(b);
                *o = if big { <$t>::from_be_bytes(a) } else { <$t>::from_le_bytes(a) } as f64;
            }
        };
    }
    match code {
        1 => each!(i8, 1),
        2 => each!(i16, 2),
        3 => each!(i32, 4),
        4 => each!(i64, 8),
        5 => each!(u8, 1),
        6 => each!(u16, 2),
        7 => each!(u32, 4),
        8 => each!(u64, 8),
        9 | 0x19 => each!(f32, 4),
        _ => each!(f64, 8),
    }
}
