//! Output for people (aligned tables with units) and for machines (`--json`), from one
//! description of the result.

use jetloop_proto::pb;
use serde_json::json;
use serde_json::Map;
use serde_json::Value;

/// A value in a report.
#[derive(Debug, Clone, PartialEq)]
pub enum Val {
    /// A number.
    Num(f64),
    /// A count or size.
    Int(u64),
    /// Text (enum names, flags).
    Text(String),
    /// Yes/no.
    Flag(bool),
    /// A number printed in its shortest plain form (band centres, counts of a unit).
    Plain(f64),
}

/// One line of a report: JSON key (with unit suffix), label for people, value, unit.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// JSON key (with the unit as suffix).
    key: &'static str,
    /// Label for people.
    label: &'static str,
    /// The value.
    value: Val,
    /// Unit shown after the value.
    unit: &'static str,
    /// Left out of the table form (kept in JSON): shown once elsewhere.
    hidden: bool,
}

/// A table inside a report: JSON key, columns (JSON key, header with unit), rows.
#[derive(Debug, Clone, Default)]
pub struct Table {
    /// JSON key.
    key: &'static str,
    /// Title shown above the table.
    title: String,
    /// Columns: JSON key and header (with unit).
    columns: Vec<(String, String)>,
    /// Rows, one cell per column (`None`: empty).
    rows: Vec<Vec<Option<Val>>>,
}

impl Table {
    /// A table stored under `key` in JSON and shown with `title`.
    pub fn new(key: &'static str, title: impl Into<String>) -> Self {
        Self { key, title: title.into(), ..Self::default() }
    }

    /// Adds a column: JSON key and header (with unit) for people.
    pub fn col(mut self, key: impl Into<String>, header: impl Into<String>) -> Self {
        self.columns.push((key.into(), header.into()));
        self
    }

    /// Adds a row; `None` cells print empty and are left out of the JSON object.
    pub fn row(&mut self, cells: Vec<Option<Val>>) {
        self.rows.push(cells);
    }

    /// A cell as table text ("-" when empty).
    fn cell_text(v: &Option<Val>) -> String {
        match v {
            None => "-".into(),
            Some(Val::Num(x)) => fmt_num(*x),
            Some(Val::Int(x)) => x.to_string(),
            Some(Val::Text(t)) => t.clone(),
            Some(Val::Flag(b)) => if *b { "yes" } else { "no" }.into(),
            Some(Val::Plain(x)) => fmt_plain(*x),
        }
    }

    /// The rows as a JSON array of objects keyed by column.
    fn to_json(&self) -> Value {
        Value::Array(
            self.rows
                .iter()
                .map(|r| {
                    let mut m = Map::new();
                    for ((k, _), v) in self.columns.iter().zip(r) {
                        if let Some(v) = v {
                            m.insert(k.clone(), val_json(v));
                        }
                    }
                    Value::Object(m)
                })
                .collect(),
        )
    }

    /// The title, the header and the rows, aligned; nothing for a table without rows.
    fn to_text(&self) -> String {
        if self.rows.is_empty() {
            return String::new();
        }
        let cells: Vec<Vec<String>> =
            self.rows.iter().map(|r| r.iter().map(Self::cell_text).collect()).collect();
        let widths: Vec<usize> = self
            .columns
            .iter()
            .enumerate()
            .map(|(i, (_, h))| cells.iter().map(|r| r[i].len()).chain([h.len()]).max().unwrap_or(0))
            .collect();
        let mut out = format!("{}\n", self.title);
        let header: Vec<String> =
            self.columns.iter().zip(&widths).map(|((_, h), w)| format!("{h:>w$}")).collect();
        out.push_str(&format!("  {}\n", header.join("  ")));
        for (r, raw) in cells.iter().zip(&self.rows) {
            let line: Vec<String> = r
                .iter()
                .zip(&widths)
                .zip(raw)
                .map(|((c, w), v)| match v {
                    Some(Val::Text(_)) => format!("{c:<w$}"),
                    _ => format!("{c:>w$}"),
                })
                .collect();
            out.push_str(&format!("  {}\n", line.join("  ")));
        }
        out
    }

    /// CSV with the JSON keys as header; empty cells for missing values; text quoted where
    /// RFC 4180 needs it (a comma, a quote or a line break inside), never altered.
    pub fn to_csv(&self) -> String {
        let mut w = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(Vec::new());
        // Writing into memory cannot fail (the writer's errors are I/O errors).
        let _ = w.write_record(self.columns.iter().map(|(k, _)| k.as_str()));
        for r in &self.rows {
            let line: Vec<String> = r
                .iter()
                .map(|v| match v {
                    None => String::new(),
                    Some(Val::Num(x)) | Some(Val::Plain(x)) => format!("{x}"),
                    Some(Val::Int(x)) => x.to_string(),
                    Some(Val::Text(t)) => t.clone(),
                    Some(Val::Flag(b)) => b.to_string(),
                })
                .collect();
            let _ = w.write_record(&line);
        }
        String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
    }
}

/// A value as JSON (numbers as numbers, flags as booleans).
pub(crate) fn val_json(v: &Val) -> Value {
    match v {
        Val::Num(x) | Val::Plain(x) => json!(x),
        Val::Int(x) => json!(x),
        Val::Text(t) => json!(t),
        Val::Flag(b) => json!(b),
    }
}

/// A result to print.
#[derive(Debug, Clone, Default)]
pub struct Report {
    /// Prints nothing (the content went elsewhere).
    quiet: bool,
    /// Prints its title line alone in table form.
    title_only: bool,
    /// The title line.
    title: String,
    /// Label-value rows.
    rows: Vec<Row>,
    /// Tables, after the rows.
    tables: Vec<Table>,
    /// Per-channel sections.
    children: Vec<Report>,
    /// Where the answer came from (models, defaults, notes).
    provenance: Option<pb::Provenance>,
}

impl Report {
    /// An empty report with a title.
    pub fn new(title: impl Into<String>) -> Self {
        Self { title: title.into(), ..Self::default() }
    }

    /// Adds a number.
    pub fn num(mut self, key: &'static str, label: &'static str, v: f64, unit: &'static str) -> Self {
        self.rows.push(Row { key, label, value: Val::Num(v), unit, hidden: false });
        self
    }

    /// Adds a number when present.
    pub fn opt(self, key: &'static str, label: &'static str, v: Option<f64>, unit: &'static str) -> Self {
        match v {
            Some(v) => self.num(key, label, v, unit),
            None => self,
        }
    }

    /// Adds a count or size.
    pub fn int(mut self, key: &'static str, label: &'static str, v: u64, unit: &'static str) -> Self {
        self.rows.push(Row { key, label, value: Val::Int(v), unit, hidden: false });
        self
    }

    /// Adds text.
    pub fn text(mut self, key: &'static str, label: &'static str, v: impl Into<String>) -> Self {
        self.rows.push(Row { key, label, value: Val::Text(v.into()), unit: "", hidden: false });
        self
    }

    /// Adds a yes/no flag.
    pub fn flag(mut self, key: &'static str, label: &'static str, v: bool) -> Self {
        self.rows.push(Row { key, label, value: Val::Flag(v), unit: "", hidden: false });
        self
    }

    /// Leaves the rows with these keys out of the table form (JSON keeps them): for figures
    /// shown once for several sections.
    pub fn hide(mut self, keys: &[&str]) -> Self {
        for r in &mut self.rows {
            if keys.contains(&r.key) {
                r.hidden = true;
            }
        }
        self
    }

    /// A report that prints nothing (its content went elsewhere, e.g. CSV on stdout).
    pub fn quiet(mut self) -> Self {
        self.quiet = true;
        self
    }

    /// A report whose table form is its title line alone (the rows and provenance stay in
    /// the JSON form): for results written to a file.
    pub fn title_only(mut self) -> Self {
        self.title_only = true;
        self
    }

    /// True for a report that prints nothing.
    pub fn is_quiet(&self) -> bool {
        self.quiet
    }

    /// Adds a per-channel section: JSON puts sections in a "channels" array, tables print them
    /// one after the other.
    pub fn child(mut self, r: Report) -> Self {
        self.children.push(r);
        self
    }

    /// Adds a table.
    pub fn table(mut self, t: Table) -> Self {
        self.tables.push(t);
        self
    }

    /// Attaches the provenance of the answer.
    pub fn provenance(mut self, p: Option<pb::Provenance>) -> Self {
        self.provenance = p;
        self
    }

    /// Machine output: one JSON object with the rows as keys and the provenance. A key that
    /// several rows share (notes of one kind, repeated cautions) becomes an array of their
    /// values in row order: no row is dropped.
    pub fn to_json(&self) -> Value {
        let mut m = Map::new();
        for r in &self.rows {
            let v = val_json(&r.value);
            if self.rows.iter().filter(|o| o.key == r.key).count() > 1 {
                match m.entry(r.key.to_string()).or_insert_with(|| Value::Array(Vec::new())) {
                    Value::Array(a) => a.push(v),
                    other => *other = v,
                }
            } else {
                m.insert(r.key.to_string(), v);
            }
        }
        for t in &self.tables {
            m.insert(t.key.to_string(), t.to_json());
        }
        if !self.children.is_empty() {
            m.insert("channels".into(), Value::Array(self.children.iter().map(Report::to_json).collect()));
        }
        if let Some(p) = &self.provenance {
            m.insert("provenance".into(), provenance_json(p));
        }
        Value::Object(m)
    }

    /// Human output: title, aligned "label  value unit" lines, then notes and sources.
    pub fn to_table(&self) -> String {
        let mut out = format!("{}\n", self.title);
        if self.title_only {
            return out;
        }
        let w = self.rows.iter().filter(|r| !r.hidden).map(|r| r.label.len()).max().unwrap_or(0);
        for r in self.rows.iter().filter(|r| !r.hidden) {
            let v = match &r.value {
                Val::Num(x) => fmt_num(*x),
                Val::Plain(x) => fmt_plain(*x),
                Val::Int(x) => x.to_string(),
                Val::Text(t) => t.clone(),
                Val::Flag(b) => if *b { "yes" } else { "no" }.to_string(),
            };
            let line = format!("  {:<w$}  {:>14} {}", r.label, v, r.unit);
            out.push_str(line.trim_end());
            out.push('\n');
        }
        for t in &self.tables {
            out.push_str(&t.to_text());
        }
        for c in &self.children {
            out.push_str(&c.to_table());
        }
        if let Some(p) = &self.provenance {
            if !p.defaults_applied.is_empty() {
                out.push_str("defaults applied:\n");
                for d in &p.defaults_applied {
                    out.push_str(&format!("  {} = {} ({})\n", d.field, d.value, d.reason));
                }
            }
            if !p.notes.is_empty() {
                out.push_str("notes:\n");
                for n in &p.notes {
                    out.push_str(&format!("  - {n}\n"));
                }
            }
            out.push_str(&format!("models (server {}):\n", p.server_version));
            for m in &p.models {
                out.push_str(&format!("  {}: {}\n", m.name, m.reference));
            }
        }
        out
    }
}

/// Six significant digits, switching to exponent form for very large or small magnitudes.
pub fn fmt_num(x: f64) -> String {
    if !x.is_finite() {
        return format!("{x}");
    }
    let a = x.abs();
    if a != 0.0 && !(1e-4..1e7).contains(&a) {
        format!("{x:.5e}")
    } else {
        let digits = if a == 0.0 { 0 } else { a.log10().floor() as i32 };
        let decimals = (5 - digits).clamp(0, 10) as usize;
        format!("{x:.decimals$}")
    }
}

/// The shortest plain form up to six significant digits: 20, 31.5, 12500, 0.0254.
pub fn fmt_plain(x: f64) -> String {
    if !x.is_finite() {
        return format!("{x}");
    }
    let t = fmt_num(x);
    if t.contains('e') || !t.contains('.') {
        return t;
    }
    t.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// A value with its standard error in plain notation, the error to two significant digits and
/// the value to the same decimal place: `0.7198 ± 0.0024`, `801.02 ± 0.89`.
pub fn fmt_uncertain(value: f64, se: f64) -> String {
    if !(se.is_finite() && se > 0.0 && value.is_finite()) {
        return fmt_plain(value);
    }
    let decimals = (1 - se.log10().floor() as i32).clamp(0, 12) as usize;
    format!("{value:.decimals$} ± {se:.decimals$}")
}

/// Provenance as JSON.
pub fn provenance_json(p: &pb::Provenance) -> Value {
    json!({
        "server_version": p.server_version,
        "models": p.models.iter().map(|m| json!({"name": m.name, "reference": m.reference})).collect::<Vec<_>>(),
        "defaults_applied": p.defaults_applied.iter().map(|d| json!({"field": d.field, "value": d.value, "reason": d.reason})).collect::<Vec<_>>(),
        "notes": p.notes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn uncertain_values_keep_the_digits_their_error_supports() {
        assert_eq!(fmt_uncertain(0.719_82, 0.0024), "0.7198 ± 0.0024");
        assert_eq!(fmt_uncertain(8.0102e-4, 8.9e-7), "0.00080102 ± 0.00000089");
        assert_eq!(fmt_uncertain(4523.7, 12.0), "4524 ± 12");
        assert_eq!(fmt_uncertain(4.0, 0.0), "4");
        assert_eq!(fmt_plain(20.0), "20");
        assert_eq!(fmt_plain(31.5), "31.5");
        assert_eq!(fmt_plain(12_500.0), "12500");
    }

    #[test]
    fn csv_text_cells_are_quoted_not_altered() {
        let mut t = Table::new("t", "T").col("channel", "channel").col("rms_pa", "rms [Pa]");
        t.row(vec![Some(Val::Text("mic \"A\", 90 deg".into())), Some(Val::Num(1.5))]);
        t.row(vec![Some(Val::Text("plain".into())), None]);
        let text = t.to_csv();
        // RFC 4180 section 2, rules 6 and 7: a field holding a comma or a quote is enclosed in
        // quotes, and a quote inside is written twice; other fields are left bare.
        assert_eq!(text, "channel,rms_pa\n\"mic \"\"A\"\", 90 deg\",1.5\nplain,\n");
        // Read back by the csv crate's reader (an RFC 4180 parser): the text is unchanged.
        let mut r = csv::ReaderBuilder::new().from_reader(text.as_bytes());
        let rows: Vec<csv::StringRecord> = r.records().map(|x| x.expect("record")).collect();
        assert_eq!(rows[0].get(0), Some("mic \"A\", 90 deg"));
        assert_eq!((rows[0].get(1), rows[1].get(1)), (Some("1.5"), Some("")));
    }

    #[test]
    fn empty_tables_print_nothing_and_hidden_rows_stay_in_json() {
        let r = Report::new("t")
            .num("a", "shown", 1.0, "")
            .num("b", "hidden", 2.0, "")
            .hide(&["b"])
            .table(Table::new("empty", "Nothing here").col("x", "x"));
        let text = r.to_table();
        assert!(
            text.contains("shown") && !text.contains("hidden") && !text.contains("Nothing here"),
            "{text}"
        );
        let j = r.to_json();
        assert_eq!(j["b"], 2.0);
        assert!(j["empty"].as_array().is_some_and(|a| a.is_empty()));
    }

    #[test]
    fn numbers_keep_six_significant_digits() {
        assert_eq!(fmt_num(0.127_804_525), "0.127805");
        assert_eq!(fmt_num(101_325.0), "101325");
        assert_eq!(fmt_num(1.5588), "1.55880");
        assert_eq!(fmt_num(1.0e-7), "1.00000e-7");
    }

    #[test]
    fn table_and_json_carry_the_same_rows() {
        let r = Report::new("t").num("mach_number", "Mach number", 2.0, "").flag("choked", "choked", true);
        assert!(r.to_table().contains("Mach number"));
        assert_eq!(r.to_json()["mach_number"], json!(2.0));
        assert_eq!(r.to_json()["choked"], json!(true));
    }

    #[test]
    fn repeated_keys_keep_every_row() {
        let r = Report::new("t")
            .text("alias", "note", "stage 0: first")
            .num("x", "x", 1.0, "")
            .text("alias", "note", "stage 1: second")
            .text("warning", "warning", "only one");
        let j = r.to_json();
        assert_eq!(j["alias"], json!(["stage 0: first", "stage 1: second"]));
        assert_eq!(j["warning"], json!("only one"));
        assert_eq!(j["x"], json!(1.0));
    }
}
