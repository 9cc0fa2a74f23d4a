//! The reader on byte arrays built field by field from NI's documented TDMS layout ("TDMS file
//! format internal structure": 28-byte lead-in with tag, ToC flags, version, next segment and
//! raw data offsets; metadata with object paths, raw data indexes of length 20 / 28 or the
//! 0xFFFFFFFF / 0x00000000 markers, typed properties; raw data in chunks, contiguous or
//! interleaved). Each expected value is the one the bytes were built from. The builders are
//! shared with the tests of the TDMS arguments.

use super::encoding::parse_path;
use super::*;
use std::io::Cursor;

pub(crate) const META: u32 = 1 << 1;
pub(crate) const NEW_LIST: u32 = 1 << 2;
pub(crate) const RAW: u32 = 1 << 3;
const INTERLEAVED: u32 = 1 << 5;
const BIG: u32 = 1 << 6;
const DAQMX: u32 = 1 << 7;

/// Bytes in one byte order.
#[derive(Default, Clone)]
pub(crate) struct Bytes {
    big: bool,
    b: Vec<u8>,
}

impl Bytes {
    pub(crate) fn new(big: bool) -> Self {
        Self { big, b: Vec::new() }
    }
    fn put(&mut self, le: &[u8]) -> &mut Self {
        if self.big {
            self.b.extend(le.iter().rev());
        } else {
            self.b.extend_from_slice(le);
        }
        self
    }
    fn u32(&mut self, v: u32) -> &mut Self {
        self.put(&v.to_le_bytes())
    }
    fn u64(&mut self, v: u64) -> &mut Self {
        self.put(&v.to_le_bytes())
    }
    fn string(&mut self, s: &str) -> &mut Self {
        self.u32(s.len() as u32);
        self.b.extend_from_slice(s.as_bytes());
        self
    }
    /// An object: path, raw data index (`None`: 0xFFFFFFFF; `Some((0, ..))`: 0x00000000;
    /// else type and number of values), properties already encoded (count, then each).
    pub(crate) fn object(
        &mut self,
        path: &str,
        index: Option<(u32, u64)>,
        props: &[(&str, u32, Vec<u8>)],
    ) -> &mut Self {
        self.string(path);
        match index {
            None => self.u32(0xFFFF_FFFF),
            Some((0, _)) => self.u32(0),
            Some((ty, n)) => self.u32(20).u32(ty).u32(1).u64(n),
        };
        self.u32(props.len() as u32);
        for (name, ty, value) in props {
            self.string(name).u32(*ty);
            self.b.extend_from_slice(value);
        }
        self
    }
}

/// A property value's bytes: a number in the segment's byte order.
pub(crate) fn num(big: bool, le: &[u8]) -> Vec<u8> {
    let mut b = Bytes::new(big);
    b.put(le);
    b.b
}

/// A text property value's bytes.
pub(crate) fn text(big: bool, s: &str) -> Vec<u8> {
    let mut b = Bytes::new(big);
    b.string(s);
    b.b
}

/// A segment: lead-in (tag, ToC little-endian, version and the two offsets in the segment's
/// byte order), metadata (object count, then `objects`), raw data.
pub(crate) fn segment(toc: u32, count: u32, objects: &Bytes, raw: &[u8]) -> Vec<u8> {
    let big = toc & BIG != 0;
    let mut meta = Bytes::new(big);
    if toc & META != 0 {
        meta.u32(count);
        meta.b.extend_from_slice(&objects.b);
    }
    let mut out = b"TDSm".to_vec();
    out.extend(toc.to_le_bytes());
    let mut lead = Bytes::new(big);
    lead.u32(4713).u64((meta.b.len() + raw.len()) as u64).u64(meta.b.len() as u64);
    out.extend(lead.b);
    out.extend(meta.b);
    out.extend_from_slice(raw);
    out
}

fn open(bytes: Vec<u8>) -> Result<TdmsFile<Cursor<Vec<u8>>>, TdmsError> {
    TdmsFile::from_reader(Path::new("rig.tdms"), Cursor::new(bytes))
}

fn read(f: &mut TdmsFile<Cursor<Vec<u8>>>, group: &str, names: &[&str]) -> Vec<Vec<f64>> {
    let chans: Vec<ChannelInfo> = names
        .iter()
        .map(|n| f.channels(group).into_iter().find(|c| c.name == *n).expect("channel"))
        .collect();
    let all = f.read_planar(&chans).expect("read");
    let mut out = Vec::new();
    let mut at = 0;
    for c in &chans {
        out.push(all[at..at + c.length as usize].to_vec());
        at += c.length as usize;
    }
    out
}

pub(crate) fn le_f64(v: &[f64]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

#[test]
fn lead_in_fields_two_contiguous_chunks_and_the_waveform_rate() {
    let mut o = Bytes::new(false);
    o.object("/", None, &[])
        .object("/'mics'", None, &[("name", 0x20, text(false, "ring"))])
        .object(
            "/'mics'/'p0'",
            Some((10, 2)),
            &[("wf_increment", 10, num(false, &(1.0f64 / 51200.0).to_le_bytes()))],
        )
        .object("/'mics'/'p1'", Some((10, 2)), &[("unit_string", 0x20, text(false, "Pa"))]);
    // Two chunks: each p0's 2 values then p1's 2 values.
    let raw = le_f64(&[1.0, 2.0, 10.0, 20.0, 3.0, 4.0, 30.0, 40.0]);
    let mut f = open(segment(META | NEW_LIST | RAW, 4, &o, &raw)).expect("opens");
    assert_eq!((f.version(), f.segment_count()), (4713, 1));
    assert_eq!(f.groups(), vec!["mics".to_string()]);
    let ch = f.channels("mics");
    assert_eq!(
        ch.iter().map(|c| (c.name.as_str(), c.length)).collect::<Vec<_>>(),
        vec![("p0", 4), ("p1", 4)]
    );
    assert_eq!(ch[0].sample_rate_hz, Some(51200.0));
    assert_eq!((ch[1].unit.as_deref(), ch[1].sample_rate_hz), (Some("Pa"), None));
    assert_eq!(
        read(&mut f, "mics", &["p1", "p0"]),
        vec![vec![10.0, 20.0, 30.0, 40.0], vec![1.0, 2.0, 3.0, 4.0]]
    );
}

#[test]
fn a_bad_tag_version_or_cut_metadata_names_the_byte_and_what_was_expected() {
    let mut o = Bytes::new(false);
    o.object("/'g'/'c'", Some((10, 1)), &[]);
    let good = segment(META | NEW_LIST | RAW, 1, &o, &le_f64(&[1.0]));
    let mut bad = good.clone();
    bad[..4].copy_from_slice(b"TDSh");
    let e = open(bad).err().expect("refused");
    assert_eq!(e.offset, Some(0));
    assert!(e.to_string().starts_with("rig.tdms: byte 0: segment tag \"TDSh\", expected \"TDSm\""), "{e}");
    let mut bad = good.clone();
    bad[8..12].copy_from_slice(&4711u32.to_le_bytes());
    let e = open(bad).err().expect("refused");
    assert_eq!((e.offset, e.message.as_str()), (Some(8), "TDMS version 4711, expected 4712 or 4713"));
    // The object path's length says 200 bytes, the section has far fewer: offset 32 (after the
    // lead-in and the object count) is named.
    let mut bad = good.clone();
    bad[32..36].copy_from_slice(&200u32.to_le_bytes());
    let e = open(bad).err().expect("refused");
    assert_eq!(e.offset, Some(36));
    assert!(e.message.contains("object path: needs 200 bytes"), "{e}");
    // An index length that is neither 20 nor a marker.
    let mut bad = good;
    let at_index = 28 + 4 + 4 + "/'g'/'c'".len();
    bad[at_index..at_index + 4].copy_from_slice(&24u32.to_le_bytes());
    let e = open(bad).err().expect("refused");
    assert_eq!(e.offset, Some(at_index as u64));
    assert!(e.message.contains("raw data index length 24 (0x00000018), expected 20"), "{e}");
}

#[test]
fn incremental_metadata_reuses_indexes_and_keeps_the_object_order() {
    // Segment 1: new list, a (int16 x3) and b (int32 x2).
    let mut o1 = Bytes::new(false);
    o1.object("/'g'/'a'", Some((2, 3)), &[]).object("/'g'/'b'", Some((3, 2)), &[]);
    let mut raw1: Vec<u8> = [1i16, 2, 3].iter().flat_map(|v| v.to_le_bytes()).collect();
    raw1.extend([100i32, 200].iter().flat_map(|v| v.to_le_bytes()));
    // Segment 2: the list goes on (no kTocNewObjList): a keeps its index (0x00000000), b has
    // no data (0xFFFFFFFF), c (uint8 x2) is appended; the chunk order is a then c.
    let mut o2 = Bytes::new(false);
    o2.object("/'g'/'a'", Some((0, 0)), &[]).object("/'g'/'b'", None, &[]).object(
        "/'g'/'c'",
        Some((5, 2)),
        &[],
    );
    let mut raw2: Vec<u8> = [4i16, 5, 6].iter().flat_map(|v| v.to_le_bytes()).collect();
    raw2.extend([7u8, 8]);
    // Segment 3: no metadata at all: segment 2's layout, two chunks.
    let mut raw3: Vec<u8> = Vec::new();
    for k in 0..2i16 {
        raw3.extend([10 + k, 20 + k, 30 + k].iter().flat_map(|v| v.to_le_bytes()));
        raw3.extend([50 + k as u8, 60 + k as u8]);
    }
    // Segment 4: b is back with "same as previous" (its index from segment 1), in the list
    // it kept; a and c have no data (an object not named keeps its index and its data).
    let mut o4 = Bytes::new(false);
    o4.object("/'g'/'a'", None, &[]).object("/'g'/'b'", Some((0, 0)), &[]).object("/'g'/'c'", None, &[]);
    let raw4: Vec<u8> = [300i32, 400].iter().flat_map(|v| v.to_le_bytes()).collect();
    let mut file = segment(META | NEW_LIST | RAW, 2, &o1, &raw1);
    file.extend(segment(META | RAW, 3, &o2, &raw2));
    file.extend(segment(RAW, 0, &Bytes::default(), &raw3));
    file.extend(segment(META | RAW, 3, &o4, &raw4));
    let mut f = open(file).expect("opens");
    assert_eq!(f.segment_count(), 4);
    let got = read(&mut f, "g", &["a", "b", "c"]);
    assert_eq!(got[0], vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 10.0, 20.0, 30.0, 11.0, 21.0, 31.0]);
    assert_eq!(got[1], vec![100.0, 200.0, 300.0, 400.0]);
    assert_eq!(got[2], vec![7.0, 8.0, 50.0, 60.0, 51.0, 61.0]);
    // "Same as previous" for an object never seen is refused at its index field.
    let mut o = Bytes::new(false);
    o.object("/'g'/'z'", Some((0, 0)), &[]);
    let e = open(segment(META | NEW_LIST | RAW, 1, &o, &[])).err().expect("refused");
    assert_eq!(e.offset, Some(28 + 4 + 4 + "/'g'/'z'".len() as u64));
    assert!(e.message.contains("same as previous"), "{e}");
}

#[test]
fn interleaved_big_endian_chunks_are_read_frame_by_frame() {
    let mut o = Bytes::new(true);
    o.object("/'g'/'i'", Some((2, 3)), &[]).object("/'g'/'f'", Some((9, 3)), &[]).object(
        "/'g'/'d'",
        Some((10, 3)),
        &[],
    );
    let mut raw = Vec::new();
    for k in 0..6 {
        raw.extend((k as i16 - 3).to_be_bytes());
        raw.extend((k as f32 * 0.5).to_be_bytes());
        raw.extend((k as f64 * 1e6).to_be_bytes());
    }
    let mut f = open(segment(META | NEW_LIST | RAW | INTERLEAVED | BIG, 3, &o, &raw)).expect("opens");
    let got = read(&mut f, "g", &["d", "i"]);
    assert_eq!(got[0], (0..6).map(|k| k as f64 * 1e6).collect::<Vec<_>>());
    assert_eq!(got[1], vec![-3.0, -2.0, -1.0, 0.0, 1.0, 2.0]);
    assert_eq!(read(&mut f, "g", &["f"])[0], vec![0.0, 0.5, 1.0, 1.5, 2.0, 2.5]);
}

#[test]
fn every_property_type_decodes_in_both_byte_orders() {
    for big in [false, true] {
        let n = |le: &[u8]| num(big, le);
        let mut ts = Bytes::new(big);
        // Little-endian: fraction then seconds; big-endian: seconds then fraction.
        if big {
            ts.u64(3_000_000_000).u64(1 << 63);
        } else {
            ts.u64(1 << 63).u64(3_000_000_000);
        }
        let mut cx = n(&1.5f64.to_le_bytes());
        cx.extend(n(&(-2.0f64).to_le_bytes()));
        let props = [
            ("i8", 1, n(&(-5i8).to_le_bytes())),
            ("i16", 2, n(&(-300i16).to_le_bytes())),
            ("i32", 3, n(&(-70000i32).to_le_bytes())),
            ("i64", 4, n(&(-(1i64 << 40)).to_le_bytes())),
            ("u8", 5, n(&200u8.to_le_bytes())),
            ("u16", 6, n(&60000u16.to_le_bytes())),
            ("u32", 7, n(&4_000_000_000u32.to_le_bytes())),
            ("u64", 8, n(&(1u64 << 60).to_le_bytes())),
            ("f32", 9, n(&0.25f32.to_le_bytes())),
            ("f64", 10, n(&(1.0f64 / 3.0).to_le_bytes())),
            ("s", 0x20, text(big, "caf\u{e9}")),
            ("b", 0x21, vec![1]),
            ("t", 0x44, ts.b),
            ("z", 0x10_000D, cx),
        ];
        let mut o = Bytes::new(big);
        o.object("/'g'/'c'", Some((10, 0)), &props);
        let toc = META | NEW_LIST | if big { BIG } else { 0 };
        let f = open(segment(toc, 1, &o, &[])).expect("opens");
        let c = f.channels("g").remove(0);
        let got: Vec<Value> = f.properties(&c).iter().map(|(_, v)| v.clone()).collect();
        assert_eq!(
            got,
            vec![
                Value::Int(-5),
                Value::Int(-300),
                Value::Int(-70000),
                Value::Int(-(1 << 40)),
                Value::UInt(200),
                Value::UInt(60000),
                Value::UInt(4_000_000_000),
                Value::UInt(1 << 60),
                Value::Float(0.25),
                Value::Float(1.0 / 3.0),
                Value::Text("caf\u{e9}".into()),
                Value::Bool(true),
                Value::Time { seconds: 3_000_000_000, fraction: 1 << 63 },
                Value::Complex(1.5, -2.0),
            ],
            "big-endian: {big}"
        );
    }
}

#[test]
fn linear_scales_chain_and_other_scale_types_are_refused_by_name() {
    let f64b = |v: f64| num(false, &v.to_le_bytes());
    let props = |kind1: &str| {
        vec![
            ("NI_Number_Of_Scales", 7, num(false, &2u32.to_le_bytes())),
            ("NI_Scaling_Status", 0x20, text(false, "unscaled")),
            ("NI_Scale[0]_Scale_Type", 0x20, text(false, "Linear")),
            ("NI_Scale[0]_Linear_Slope", 10, f64b(2.0)),
            ("NI_Scale[0]_Linear_Y_Intercept", 10, f64b(1.0)),
            ("NI_Scale[1]_Scale_Type", 0x20, text(false, kind1)),
            ("NI_Scale[1]_Linear_Slope", 10, f64b(10.0)),
            ("NI_Scale[1]_Linear_Y_Intercept", 10, f64b(-3.0)),
            ("NI_Scale[1]_Linear_Input_Source", 7, num(false, &0u32.to_le_bytes())),
        ]
    };
    let mut o = Bytes::new(false);
    o.object("/'g'/'lin'", Some((2, 3)), &props("Linear")).object(
        "/'g'/'poly'",
        Some((2, 3)),
        &props("Polynomial"),
    );
    let raw: Vec<u8> = [-1i16, 0, 5, 1, 2, 3].iter().flat_map(|v| v.to_le_bytes()).collect();
    let mut f = open(segment(META | NEW_LIST | RAW, 2, &o, &raw)).expect("opens");
    let ch = f.channels("g");
    // Scale 1 takes scale 0's output: 10 * (2 x + 1) - 3 = 20 x + 7.
    assert_eq!(ch[0].scaling, Ok(Some(Linear { slope: 20.0, intercept: 7.0 })));
    assert_eq!(read(&mut f, "g", &["lin"])[0], vec![-13.0, 7.0, 107.0]);
    let e = ch[1].scaling.clone().unwrap_err();
    assert!(
        e.contains("NI_Scale[1]_Scale_Type is Text(\"Polynomial\")") && e.contains("only \"Linear\""),
        "{e}"
    );
    let e = f.read_planar(&ch[1..]).unwrap_err();
    assert!(e.to_string().starts_with("rig.tdms: channel 'poly' of group 'g'"), "{e}");
    // Marked "scaled": stored already scaled, read as they are.
    let mut p = props("Linear");
    p[1].2 = text(false, "scaled");
    let mut o = Bytes::new(false);
    o.object("/'g'/'s'", Some((2, 3)), &p);
    let mut f = open(segment(META | NEW_LIST | RAW, 1, &o, &raw[..6])).expect("opens");
    assert_eq!(f.channels("g")[0].scaling, Ok(None));
    assert_eq!(read(&mut f, "g", &["s"])[0], vec![-1.0, 0.0, 5.0]);
}

#[test]
fn strings_and_daqmx_data_are_refused_naming_the_channel_and_the_byte() {
    let mut o = Bytes::new(false);
    o.string("/'g'/'s'").u32(28).u32(0x20).u32(1).u64(2).u64(8 + 3).u32(0);
    o.object("/'g'/'v'", Some((10, 1)), &[]);
    let mut raw = Vec::new();
    raw.extend(1u32.to_le_bytes()); // string offsets: ends at 1, then 3
    raw.extend(3u32.to_le_bytes());
    raw.extend(b"abc");
    raw.extend(2.5f64.to_le_bytes());
    let mut f = open(segment(META | NEW_LIST | RAW, 2, &o, &raw)).expect("opens");
    // The float channel after the string one is found past the string's bytes.
    assert_eq!(read(&mut f, "g", &["v"])[0], vec![2.5]);
    let s = f.channels("g").remove(0);
    let e = f.read_planar(&[s]).unwrap_err();
    assert_eq!(e.offset, Some(0));
    assert!(e.message.contains("channel /'g'/'s' holds string data"), "{e}");
    // A DAQmx raw data index is refused at its header.
    let mut o = Bytes::new(false);
    o.string("/'g'/'daq'").u32(0x1269).u32(0xFFFF_FFFF);
    let e = open(segment(META | NEW_LIST, 1, &o, &[])).err().expect("refused");
    assert_eq!(e.offset, Some(28 + 4 + 4 + "/'g'/'daq'".len() as u64));
    assert!(e.message.contains("DAQmx raw data index (0x00001269)"), "{e}");
    let e = open(segment(META | NEW_LIST | RAW | DAQMX, 0, &Bytes::default(), &[])).err().expect("refused");
    assert_eq!(e.offset, Some(4));
    assert!(e.message.contains("kTocDAQmxRawData"), "{e}");
}

#[test]
fn a_segment_cut_short_is_read_as_far_as_it_goes_with_a_warning() {
    let mut o = Bytes::new(false);
    o.object("/'g'/'a'", Some((10, 4)), &[]).object("/'g'/'b'", Some((10, 4)), &[]);
    let raw = le_f64(&[1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0]);
    let mut file = segment(META | NEW_LIST | RAW, 2, &o, &raw);
    // The writer stopped: next segment offset all ones, and 6 of the 8 values written.
    file[12..20].copy_from_slice(&u64::MAX.to_le_bytes());
    file.truncate(file.len() - 16);
    let mut f = open(file).expect("opens");
    assert!(f.warnings().iter().any(|w| w.contains("rig.tdms: byte 12:")), "{:?}", f.warnings());
    assert!(f.warnings().iter().any(|w| w.contains("partial chunk")), "{:?}", f.warnings());
    // Contiguous and cut: a's 4 values, then b's first 2.
    assert_eq!(read(&mut f, "g", &["a", "b"]), vec![vec![1.0, 2.0, 3.0, 4.0], vec![5.0, 6.0]]);
}

/// A source that records which byte ranges were read.
struct Spy {
    inner: Cursor<Vec<u8>>,
    reads: std::rc::Rc<std::cell::RefCell<Vec<(u64, usize)>>>,
}

impl Read for Spy {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let at = self.inner.position();
        let n = self.inner.read(buf)?;
        self.reads.borrow_mut().push((at, n));
        Ok(n)
    }
}

impl Seek for Spy {
    fn seek(&mut self, pos: std::io::SeekFrom) -> std::io::Result<u64> {
        self.inner.seek(pos)
    }
}

#[test]
fn only_the_bytes_of_the_channels_asked_are_read_from_contiguous_chunks() {
    let mut o = Bytes::new(false);
    o.object("/'g'/'skip'", Some((10, 1000)), &[]).object("/'g'/'want'", Some((10, 10)), &[]);
    let mut raw = le_f64(&[0.0; 1000]);
    raw.extend(le_f64(&(0..10).map(f64::from).collect::<Vec<_>>()));
    let bytes = segment(META | NEW_LIST | RAW, 2, &o, &raw);
    let skip = (bytes.len() - raw.len()) as u64..(bytes.len() - 80) as u64;
    let reads = std::rc::Rc::new(std::cell::RefCell::new(Vec::new()));
    let spy = Spy { inner: Cursor::new(bytes), reads: reads.clone() };
    let mut f = TdmsFile::from_reader(Path::new("rig.tdms"), spy).expect("opens");
    reads.borrow_mut().clear();
    let want = f.channels("g").remove(1);
    assert_eq!(f.read_planar(&[want]).expect("read"), (0..10).map(f64::from).collect::<Vec<_>>());
    for &(at, n) in reads.borrow().iter() {
        let end = at + n as u64;
        assert!(end <= skip.start || at >= skip.end, "read {at}..{end} inside the other channel's {skip:?}");
    }
}

#[test]
fn object_paths_with_quotes_and_slashes_in_names() {
    assert_eq!(parse_path("/"), Ok((None, None)));
    assert_eq!(parse_path("/'it''s'"), Ok((Some("it's".into()), None)));
    assert_eq!(parse_path("/'a/b'/'p (Pa)'"), Ok((Some("a/b".into()), Some("p (Pa)".into()))));
    assert!(parse_path("/'g'/'c'/'x'").unwrap_err().contains("3 names"));
    assert!(parse_path("g").is_err());
    assert!(parse_path("/'open").unwrap_err().contains("closing quote"));
}
