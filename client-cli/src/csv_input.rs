//! CSV recordings into `Samples`: one delimiter per file (comma, semicolon or tab, detected
//! from the first rows or given), one decimal mark per file (point, or comma as in European
//! exports), quoted fields (RFC 4180, parsed by the `csv` crate), a header row of channel
//! names (with units such as `p [Pa]`, `mic1 (V)`, `p/Pa`), and a time column from which the
//! sample rate in Hz is derived after checking that the sampling is uniform.
//!
//! Rows and columns in messages are 1-based, as a spreadsheet shows them: a row is the line
//! of the file where the record starts (comment and blank lines count), a column is also
//! given as its spreadsheet letter.

use crate::failure::Failure;
use jetloop_proto::pb;
use std::path::Path;

mod time;

/// Column separators tried when none is given, in order of preference on a tie.
const CANDIDATES: [u8; 3] = [b',', b';', b'\t'];
/// Content rows looked at to detect the delimiter and the header.
const SAMPLE_ROWS: usize = 50;

/// Which column holds the time stamps of the rows.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub(crate) enum TimeColumn {
    /// A header column named like a time (time, t, time_s, `time [s]`, `Time (s)`, zeit, ...).
    #[default]
    Auto,
    /// No time column: every column is a channel.
    None,
    /// The column with this header name (case-insensitive, with or without its unit).
    Named(String),
    /// The column at this 1-based position.
    Index(usize),
}

impl TimeColumn {
    /// `--time-column NAME|INDEX`: a whole number is a 1-based column position, anything
    /// else a header name.
    pub(crate) fn parse(text: &str) -> Self {
        match text.trim().parse::<usize>() {
            Ok(i) => Self::Index(i),
            Err(_) => Self::Named(text.trim().to_string()),
        }
    }
}

/// How to read a CSV recording (the CSV flags of the recording arguments).
#[derive(Debug, Clone, Default)]
pub(crate) struct CsvOptions {
    /// The column separator; detected from the first rows when `None`.
    pub delimiter: Option<u8>,
    /// Numbers are written with a decimal comma (`0,25`); detected when false.
    pub decimal_comma: bool,
    /// The time column.
    pub time_column: TimeColumn,
    /// The sample rate in Hz given on the command line (checked against a time column).
    pub sample_rate_hz: Option<f64>,
}

/// The time column of a recording and the sample rate it gives.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct TimeInfo {
    /// 1-based column position.
    pub column: usize,
    /// Its header text ("" without a header).
    pub name: String,
    /// Seconds per unit of its values (1 for seconds, 1e-3 for ms, ...).
    pub seconds_per_unit: f64,
    /// Sample rate in Hz from its mean step (first to last row), when it has two rows or more.
    pub rate_hz: Option<f64>,
    /// Largest distance in s allowed between a time stamp and the uniform grid.
    pub tolerance_s: f64,
}

/// What a CSV recording held and how it was read.
#[derive(Debug, Clone)]
pub(crate) struct CsvRecording {
    /// The channels, planar, at the sample rate used.
    pub samples: pb::Samples,
    /// The column separator.
    pub delimiter: u8,
    /// Whether numbers had decimal commas.
    pub decimal_comma: bool,
    /// Data rows read.
    pub rows: usize,
    /// Units of the channels from the header (`None` where none was written).
    pub units: Vec<Option<String>>,
    /// The time column, if any.
    pub time: Option<TimeInfo>,
}

impl CsvRecording {
    /// One line saying how the file was read: delimiter, decimal mark, channels with units,
    /// time column and where the sample rate came from.
    pub(crate) fn summary(&self, path: &Path) -> String {
        let delim = match self.delimiter {
            b'\t' => "tab".to_string(),
            d => format!("'{}'", d as char),
        };
        let mark = if self.decimal_comma { "decimal comma" } else { "decimal point" };
        let names: Vec<String> = (0..self.units.len())
            .map(|i| self.samples.channel_names.get(i).cloned().unwrap_or_else(|| format!("ch{i}")))
            .collect();
        let units: Vec<&str> = self.units.iter().map(|u| u.as_deref().unwrap_or("-")).collect();
        let units = match self.units.iter().any(Option::is_some) {
            true => format!(", units [{}]", units.join(", ")),
            false => String::new(),
        };
        let rate = match &self.time {
            Some(t) => format!(
                "; time column {} '{}': {} Hz{}",
                t.column,
                t.name,
                self.samples.sample_rate_hz,
                if t.rate_hz.is_some() {
                    format!(", uniform within {:.3e} s", t.tolerance_s)
                } else {
                    String::new()
                }
            ),
            None => format!("; {} Hz from --sample-rate-hz", self.samples.sample_rate_hz),
        };
        format!(
            "read {}: {} rows, {} channel(s) [{}]{units}, delimiter {delim}, {mark}{rate}",
            path.display(),
            self.rows,
            self.units.len(),
            names.join(", ")
        )
    }
}

/// Spreadsheet letters of a 1-based column (1 -> A, 27 -> AA).
pub(crate) fn column_letters(mut col: usize) -> String {
    let mut out = Vec::new();
    while col > 0 {
        let r = (col - 1) % 26;
        out.push(b'A' + r as u8);
        col = (col - 1) / 26;
    }
    out.reverse();
    String::from_utf8(out).unwrap_or_default()
}

/// A header cell split into its name and unit: `p [Pa]`, `mic1 (V)`, `p / Pa`; `None` when
/// no unit is written this way.
pub(crate) fn split_unit(header: &str) -> (&str, Option<&str>) {
    let h = header.trim();
    for (open, close) in [('[', ']'), ('(', ')')] {
        if let (Some(stripped), Some(i)) = (h.strip_suffix(close), h.rfind(open)) {
            if i < stripped.len() {
                return (h[..i].trim(), Some(stripped[i + 1..].trim()));
            }
        }
    }
    match h.rsplit_once('/') {
        Some((name, unit)) if !name.trim().is_empty() && !unit.trim().is_empty() => {
            (name.trim(), Some(unit.trim()))
        }
        _ => (h, None),
    }
}

/// A channel's unit from its header: the written unit, or a known unit suffix (`p1_pa`).
fn channel_unit(header: &str) -> Option<String> {
    if let (_, Some(u)) = split_unit(header) {
        return Some(u.to_string());
    }
    let lower = header.trim().to_ascii_lowercase();
    [("_pa", "Pa"), ("_kpa", "kPa"), ("_v", "V"), ("_mv", "mV")]
        .iter()
        .find(|(suffix, _)| lower.ends_with(suffix) && lower.len() > suffix.len())
        .map(|(_, u)| u.to_string())
}

/// The cell as a number when it is one, with a decimal comma allowed or not.
fn as_number(cell: &str, comma: bool) -> Option<f64> {
    let c = cell.trim();
    let v = if comma && c.contains(',') && !c.contains('.') {
        c.replace(',', ".").parse::<f64>().ok()
    } else if c.contains(',') {
        None
    } else {
        c.parse::<f64>().ok()
    };
    v.filter(|x| x.is_finite())
}

/// A csv reader over `text` with `delimiter`: trimmed cells, rows of any width, `#` comments.
fn reader(text: &str, delimiter: u8) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(text.as_bytes())
}

/// File line numbers of records. The `csv` crate's record position is where its scan began,
/// before the blank and comment lines it skipped; this moves past those and counts the line
/// breaks before the record (once over the file).
struct Lines<'a> {
    text: &'a [u8],
    /// Bytes counted so far.
    byte: usize,
    /// Line breaks before `byte`.
    breaks: u64,
}

impl<'a> Lines<'a> {
    fn new(text: &'a str) -> Self {
        Self { text: text.as_bytes(), byte: 0, breaks: 0 }
    }

    /// The 1-based line of the record whose scan began at byte `start`.
    fn line_of(&mut self, rec: &csv::StringRecord) -> u64 {
        let mut at = rec.position().map_or(0, |p| p.byte() as usize).max(self.byte);
        loop {
            match self.text.get(at) {
                Some(b'\r' | b'\n') => at += 1,
                Some(b'#') => {
                    at += self.text[at..]
                        .iter()
                        .position(|b| *b == b'\n')
                        .map_or(self.text.len() - at, |n| n + 1)
                }
                _ => break,
            }
        }
        let end = at.min(self.text.len());
        self.breaks += self.text[self.byte..end].iter().filter(|b| **b == b'\n').count() as u64;
        self.byte = end;
        self.breaks + 1
    }
}

/// A record that holds nothing to read: every cell empty, or a comment after spaces.
fn skipped(rec: &csv::StringRecord) -> bool {
    rec.iter().all(str::is_empty) || rec.get(0).is_some_and(|c| c.starts_with('#'))
}

/// The first content rows of `text` read with `delimiter` (a bad record ends the sample).
fn sample_rows(text: &str, delimiter: u8) -> Vec<Vec<String>> {
    reader(text, delimiter)
        .records()
        .map_while(Result::ok)
        .filter(|r| !skipped(r))
        .take(SAMPLE_ROWS)
        .map(|r| r.iter().map(str::to_string).collect())
        .collect()
}

/// The rows of a delimited text file: (line index from 0, trimmed cells), skipping blank
/// lines and `#` comments, with one delimiter for the whole file (the candidate that splits
/// most of the first rows into several cells; comma on a tie) and quoted cells unquoted.
pub(crate) fn rows(text: &str) -> Vec<(usize, Vec<String>)> {
    let delimiter = CANDIDATES
        .iter()
        .copied()
        .max_by_key(|&d| {
            let split = sample_rows(text, d).iter().filter(|r| r.len() > 1).count();
            // max_by_key keeps the last maximum: rank earlier candidates higher on a tie.
            (split, CANDIDATES.len() - CANDIDATES.iter().position(|c| *c == d).unwrap_or(0))
        })
        .unwrap_or(b',');
    let mut lines = Lines::new(text);
    reader(text, delimiter)
        .records()
        .map_while(Result::ok)
        .filter(|r| !skipped(r))
        .map(|r| (lines.line_of(&r) as usize - 1, r.iter().map(str::to_string).collect()))
        .collect()
}

/// How the first rows read with one candidate delimiter.
struct Trial {
    delimiter: u8,
    /// Cells of the header row, if the first row is one (no cell is a number).
    header: Option<usize>,
    /// Cells of every data row when they all agree.
    width: Option<usize>,
    /// Every data cell is a number.
    numeric: bool,
    /// Rows split into more than one cell.
    split: usize,
}

/// The column separator of a recording: among comma, semicolon and tab (comma left out with
/// `decimal_comma`), the one whose first rows have one width above 1 that the header shares,
/// with numbers in every data cell; else a single column when no candidate splits the header;
/// else the candidate whose data rows agree on the widest width (the full read then names the
/// row or cell that does not fit).
pub(crate) fn detect_delimiter(text: &str, decimal_comma: bool) -> u8 {
    let trials: Vec<Trial> = CANDIDATES
        .iter()
        .filter(|&&d| !(decimal_comma && d == b','))
        .map(|&d| {
            let comma = d != b',' || decimal_comma;
            let rows = sample_rows(text, d);
            let numeric_row = |r: &Vec<String>| r.iter().any(|c| as_number(c, comma).is_some());
            let header = rows.first().filter(|r| !numeric_row(r)).map(Vec::len);
            let data = &rows[usize::from(header.is_some()).min(rows.len())..];
            let width = data.first().map(Vec::len).filter(|w| data.iter().all(|r| r.len() == *w));
            let numeric = !data.is_empty() && data.iter().flatten().all(|c| as_number(c, comma).is_some());
            let split = rows.iter().filter(|r| r.len() > 1).count();
            Trial { delimiter: d, header, width, numeric, split }
        })
        .collect();
    let fits = |t: &&Trial| t.numeric && t.width.is_some() && t.header.is_none_or(|h| Some(h) == t.width);
    let widest =
        |ts: Vec<&Trial>| ts.into_iter().rev().max_by_key(|t| t.width.unwrap_or(0)).map(|t| t.delimiter);
    if let Some(d) = widest(trials.iter().filter(fits).filter(|t| t.width > Some(1)).collect()) {
        return d;
    }
    let unsplit_header = trials.iter().all(|t| t.header.is_none_or(|h| h == 1));
    if unsplit_header {
        if let Some(t) = trials.iter().find(|t| fits(t)) {
            return t.delimiter;
        }
    }
    // Nothing fits: the candidate whose rows agree on a width above 1, else the one that
    // splits most rows (comma first on a tie); the full read names what does not fit.
    trials.iter().rev().max_by_key(|t| (t.width > Some(1), t.split)).map_or(b',', |t| t.delimiter)
}

/// The decimal mark seen so far: none yet, or the first cell that showed it (row, column).
#[derive(Debug, Clone, Copy)]
enum Mark {
    Unknown,
    Point(u64, usize),
    Comma(u64, usize),
    CommaGiven,
}

/// Reads a CSV recording: `bytes` of the file at `path` (named in every message), read with
/// `options`, every channel with `calibration`.
///
/// # Errors
/// [`Failure::Usage`] naming the file, the row and column (1-based) and the value for: text
/// that is not UTF-8 (byte offset), a header whose width differs from the rows, a row of
/// another width, a cell that is not a number, mixed decimal marks, a time column that is
/// missing, not uniform or contradicts `--sample-rate-hz`, and no sample rate at all.
pub(crate) fn read(
    path: &Path,
    bytes: &[u8],
    options: &CsvOptions,
    calibration: pb::Calibration,
) -> Result<CsvRecording, Failure> {
    let file = path.display();
    let text = std::str::from_utf8(bytes).map_err(|e| {
        Failure::Usage(format!(
            "{file}: not UTF-8 text at byte offset {} (CSV files must be UTF-8; re-export as UTF-8)",
            e.valid_up_to()
        ))
    })?;
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let delimiter = options.delimiter.unwrap_or_else(|| detect_delimiter(text, options.decimal_comma));
    let comma_allowed = delimiter != b',' || options.decimal_comma;
    let mut mark = if options.decimal_comma { Mark::CommaGiven } else { Mark::Unknown };
    let mut header: Option<(u64, Vec<String>)> = None;
    let mut columns: Vec<Vec<f64>> = Vec::new();
    let mut lines: Vec<u64> = Vec::new();
    let mut time_col: Option<usize> = None;
    let mut resolutions: Vec<f64> = Vec::new();
    let mut first = true;
    let mut rdr = reader(text, delimiter);
    let mut rows_at = Lines::new(text);
    let mut rec = csv::StringRecord::new();
    loop {
        match rdr.read_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(Failure::Usage(format!("{file}: {e}"))),
        }
        if skipped(&rec) {
            continue;
        }
        let row = rows_at.line_of(&rec);
        if first {
            first = false;
            if rec.iter().all(|c| as_number(c, comma_allowed).is_none()) {
                header = Some((row, rec.iter().map(str::to_string).collect()));
                continue;
            }
        }
        if columns.is_empty() {
            let width = rec.len();
            if let Some((hrow, names)) = &header {
                if names.len() != width {
                    return Err(Failure::Usage(format!(
                        "{file}: the header (row {hrow}) has {} column(s) but the data rows have {width} \
                         (first data row {row}){}",
                        names.len(),
                        hint(delimiter, names.len(), width)
                    )));
                }
            }
            columns = vec![Vec::new(); width];
            time_col = time_column(path, &options.time_column, header.as_ref().map(|h| &h.1[..]), width)?;
        }
        if rec.len() != columns.len() {
            return Err(Failure::Usage(format!(
                "{file}: row {row} has {} column(s), the rows above have {} (delimiter {})",
                rec.len(),
                columns.len(),
                delimiter_name(delimiter)
            )));
        }
        for (c, cell) in rec.iter().enumerate() {
            let name = header.as_ref().map(|h| h.1[c].as_str());
            let v = number(cell, &mut mark, row, c + 1)
                .map_err(|why| Failure::Usage(format!("{file}: {}: {why}", place(row, c + 1, name))))?;
            columns[c].push(v);
            if time_col == Some(c) {
                resolutions.push(time::resolution(cell));
            }
        }
        lines.push(row);
    }
    if columns.is_empty() {
        return Err(Failure::Usage(format!("{file}: no data rows (only a header, comments or blank lines)")));
    }
    let names = header.map(|h| h.1);
    let time = match time_col {
        Some(c) => Some(time::check(path, options, c, names.as_deref(), &columns[c], &lines, &resolutions)?),
        None => None,
    };
    let sample_rate_hz = match (&time, options.sample_rate_hz) {
        (_, Some(given)) => given,
        (Some(TimeInfo { rate_hz: Some(r), .. }), None) => *r,
        (Some(t), None) => {
            return Err(Failure::Usage(format!(
                "{file}: the time column '{}' has a single row, which gives no sample rate: give --sample-rate-hz",
                t.name
            )))
        }
        (None, None) => {
            return Err(Failure::Usage(format!(
                "{file}: no sample rate: give --sample-rate-hz, or a time column in seconds (a header \
                 named time, t, time_s, 'time [s]', zeit..., or --time-column NAME|INDEX)"
            )))
        }
    };
    if let Some(c) = time_col {
        columns.remove(c);
    }
    if columns.is_empty() {
        return Err(Failure::Usage(format!("{file}: no channel besides the time column")));
    }
    let mut channel_names = names.unwrap_or_default();
    if let Some(c) = time_col.filter(|c| *c < channel_names.len()) {
        channel_names.remove(c);
    }
    for (i, n) in channel_names.iter_mut().enumerate() {
        if n.is_empty() {
            *n = format!("column {}", i + 1 + usize::from(time_col.is_some_and(|t| t <= i)));
        }
    }
    let units = match channel_names.is_empty() {
        true => vec![None; columns.len()],
        false => channel_names.iter().map(|n| channel_unit(n)).collect(),
    };
    let channels = columns.len() as u32;
    Ok(CsvRecording {
        delimiter,
        decimal_comma: matches!(mark, Mark::Comma(..) | Mark::CommaGiven),
        rows: lines.len(),
        units,
        time,
        samples: pb::Samples {
            sample_rate_hz,
            channel_count: channels,
            layout: pb::ChannelLayout::Planar as i32,
            data: Some(pb::samples::Data::Values(pb::SampleValues { values: columns.concat() })),
            calibration: Some(calibration),
            channel_names,
            channel_calibrations: Vec::new(),
        },
    })
}

/// The delimiter as words for messages.
fn delimiter_name(d: u8) -> &'static str {
    match d {
        b',' => "comma",
        b';' => "semicolon",
        b'\t' => "tab",
        _ => "other",
    }
}

/// A hint for a header/row width mismatch that decimal commas in a comma file would explain.
fn hint(delimiter: u8, header: usize, width: usize) -> &'static str {
    if delimiter == b',' && width > header {
        "; if the commas in the rows are decimal commas, give --decimal-comma (or --delimiter ';')"
    } else {
        ""
    }
}

/// "row R, column C (L, 'name')" for messages.
pub(crate) fn place(row: u64, col: usize, name: Option<&str>) -> String {
    match name {
        Some(n) => format!("row {row}, column {col} ({}, '{n}')", column_letters(col)),
        None => format!("row {row}, column {col} ({})", column_letters(col)),
    }
}

/// A data cell as a number, keeping the file to one decimal mark (`mark`, updated with the
/// first cell that shows one, at `row` and `col`).
fn number(cell: &str, mark: &mut Mark, row: u64, col: usize) -> Result<f64, String> {
    if cell.is_empty() {
        return Err("empty cell, expected a number".into());
    }
    let (point, comma) = (cell.contains('.'), cell.contains(','));
    if point && comma {
        return Err(format!(
            "'{cell}' has both a decimal point and a comma (thousands separators are not read)"
        ));
    }
    let other = |what: &str, first: String| {
        format!("'{cell}' uses a decimal {what}, but {first}: one decimal mark per file")
    };
    match (*mark, point, comma) {
        (Mark::Unknown, true, _) => *mark = Mark::Point(row, col),
        (Mark::Unknown, _, true) => *mark = Mark::Comma(row, col),
        (Mark::Point(r, c), _, true) => {
            return Err(other("comma", format!("{} uses decimal points", place(r, c, None))))
        }
        (Mark::Comma(r, c), true, _) => {
            return Err(other("point", format!("{} uses decimal commas", place(r, c, None))))
        }
        (Mark::CommaGiven, true, _) => return Err(other("point", "--decimal-comma was given".into())),
        _ => {}
    }
    as_number(cell, comma).ok_or_else(|| format!("'{cell}' is not a number"))
}

/// The 0-based index of the time column, if any: `choice` among the `header` names (or by
/// position among `width` columns).
fn time_column(
    path: &Path,
    choice: &TimeColumn,
    header: Option<&[String]>,
    width: usize,
) -> Result<Option<usize>, Failure> {
    let file = path.display();
    match (choice, header) {
        (TimeColumn::None, _) | (TimeColumn::Auto, None) => Ok(None),
        (TimeColumn::Auto, Some(names)) => Ok(names.iter().position(|n| time::is_time_name(n))),
        (TimeColumn::Index(i), _) if (1..=width).contains(i) => Ok(Some(i - 1)),
        (TimeColumn::Index(i), _) => Err(Failure::Usage(format!(
            "{file}: --time-column {i}: the file has columns 1 to {width}"
        ))),
        (TimeColumn::Named(n), None) => Err(Failure::Usage(format!(
            "{file}: --time-column '{n}': the file has no header row of names (give the column's position instead)"
        ))),
        (TimeColumn::Named(n), Some(names)) => {
            let want = n.to_lowercase();
            names
                .iter()
                .position(|h| h.to_lowercase() == want || split_unit(h).0.to_lowercase() == want)
                .map(Some)
                .ok_or_else(|| {
                    Failure::Usage(format!("{file}: --time-column '{n}': no such column (header: {})", names.join(", ")))
                })
        }
    }
}

#[cfg(test)]
mod tests;
