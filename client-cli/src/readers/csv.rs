//! Recordings in delimited text (one column per channel, an optional header row of channel
//! names) and the delimited-text rows the other CSV readers share.

use crate::failure::Failure;
use jetloop_proto::pb;
use std::path::Path;

/// The rows of a delimited text file: (line index from 0, trimmed cells), skipping blank
/// lines and `#` comments. Cells are separated by commas, semicolons or tabs.
pub fn csv_rows(text: &str) -> impl Iterator<Item = (usize, Vec<&str>)> {
    text.lines().enumerate().filter_map(|(i, line)| {
        let line = line.trim();
        (!line.is_empty() && !line.starts_with('#'))
            .then(|| (i, line.split([',', ';', '\t']).map(str::trim).collect()))
    })
}

/// A CSV file's `bytes` (one column per channel, an optional header row of channel names) as
/// sample values, channel by channel, at `sample_rate_hz` (Hz); `path` names the file in
/// messages.
///
/// # Errors
/// [`Failure::Usage`] for text that is not UTF-8, a row with another number of columns, or a
/// cell that is not a number (the line is named).
pub(crate) fn csv(
    path: &Path,
    bytes: &[u8],
    sample_rate_hz: f64,
    calibration: pb::Calibration,
) -> Result<pb::Samples, Failure> {
    let text = std::str::from_utf8(bytes)
        .map_err(|_| Failure::Usage(format!("{}: CSV files must be UTF-8 text", path.display())))?;
    let mut names = Vec::new();
    let mut columns: Vec<Vec<f64>> = Vec::new();
    for (i, cells) in csv_rows(text) {
        if columns.is_empty() && names.is_empty() && cells.iter().any(|c| c.parse::<f64>().is_err()) {
            names = cells.iter().map(|c| c.to_string()).collect();
            continue;
        }
        if columns.is_empty() {
            columns = vec![Vec::new(); cells.len()];
        }
        if cells.len() != columns.len() {
            return Err(Failure::Usage(format!(
                "{} line {}: {} columns, expected {}",
                path.display(),
                i + 1,
                cells.len(),
                columns.len()
            )));
        }
        for (col, c) in columns.iter_mut().zip(&cells) {
            col.push(c.parse::<f64>().map_err(|_| {
                Failure::Usage(format!("{} line {}: '{c}' is not a number", path.display(), i + 1))
            })?);
        }
    }
    let channels = columns.len() as u32;
    if !names.is_empty() && names.len() != columns.len() {
        names.clear();
    }
    Ok(pb::Samples {
        sample_rate_hz,
        channel_count: channels.max(1),
        layout: pb::ChannelLayout::Planar as i32,
        data: Some(pb::samples::Data::Values(pb::SampleValues { values: columns.concat() })),
        calibration: Some(calibration),
        channel_names: names,
        channel_calibrations: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    //! CSV text -> messages, without a server.

    use super::*;

    fn cal() -> pb::Calibration {
        pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(2000.0)) }
    }

    #[test]
    fn a_csv_row_of_the_wrong_width_or_a_word_is_named_by_its_line() {
        let s = csv(Path::new("m.csv"), b"# two mics\n1,2\n3,4\n", 1000.0, cal()).expect("samples");
        assert!(s.channel_names.is_empty(), "no header row");
        assert_eq!(
            s.data,
            Some(pb::samples::Data::Values(pb::SampleValues { values: vec![1.0, 3.0, 2.0, 4.0] }))
        );
        let e = csv(Path::new("m.csv"), b"a,b\n1,2\n3\n", 1000.0, cal()).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m == "m.csv line 3: 1 columns, expected 2"), "{e:?}");
        let e = csv(Path::new("m.csv"), b"1,2\n3,x\n", 1000.0, cal()).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m == "m.csv line 2: 'x' is not a number"), "{e:?}");
    }
}
