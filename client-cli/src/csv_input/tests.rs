//! CSV text -> `Samples`, without a server. The expected values are the numbers written in
//! each file (the text is the reference) or closed forms stated beside each check.

use super::time::resolution;
use super::time::uniform_step;
use super::*;

fn cal() -> pb::Calibration {
    pb::Calibration { scale: Some(pb::calibration::Scale::InPascals(true)) }
}

fn opts(rate: Option<f64>) -> CsvOptions {
    CsvOptions { sample_rate_hz: rate, ..CsvOptions::default() }
}

fn ok(text: &str, o: &CsvOptions) -> CsvRecording {
    read(Path::new("m.csv"), text.as_bytes(), o, cal()).expect("read")
}

fn err(text: &str, o: &CsvOptions) -> String {
    match read(Path::new("m.csv"), text.as_bytes(), o, cal()) {
        Err(Failure::Usage(m)) => m,
        other => panic!("expected a refusal, got {other:?}"),
    }
}

fn values(r: &CsvRecording) -> Vec<f64> {
    match &r.samples.data {
        Some(pb::samples::Data::Values(v)) => v.values.clone(),
        other => panic!("{other:?}"),
    }
}

#[test]
fn a_european_export_is_two_channels_of_decimal_comma_numbers() {
    // The file of the issue: semicolons between columns, decimal commas (as written by a
    // spreadsheet in a German locale); it used to become 4 channels.
    let r = ok("0,123;0,456\n0,789;-1,5\n", &opts(Some(1000.0)));
    assert_eq!((r.delimiter, r.decimal_comma, r.samples.channel_count), (b';', true, 2));
    assert_eq!(values(&r), vec![0.123, 0.789, 0.456, -1.5], "column by column");
    // With a header, units and a time column in ms: 1 / 0.5 ms = 2000 Hz (closed form).
    let r = ok("Zeit [ms];p1 [Pa];p2 [Pa]\n0,0;1,25;2\n0,5;1,5;3\n1,0;1,75;4\n", &opts(None));
    assert_eq!(r.samples.channel_names, vec!["p1 [Pa]".to_string(), "p2 [Pa]".to_string()]);
    assert_eq!(r.units, vec![Some("Pa".to_string()), Some("Pa".to_string())]);
    assert!((r.samples.sample_rate_hz - 2000.0).abs() < 1e-9, "{}", r.samples.sample_rate_hz);
    assert_eq!(r.time.as_ref().map(|t| (t.column, t.seconds_per_unit)), Some((1, 1e-3)));
    assert_eq!(values(&r), vec![1.25, 1.5, 1.75, 2.0, 3.0, 4.0]);
    // A single column of decimal commas under a header is one channel, not two.
    let r = ok("p_pa\n0,5\n1,5\n", &opts(Some(10.0)));
    assert_eq!((r.samples.channel_count, values(&r)), (1, vec![0.5, 1.5]));
    assert_eq!(r.units, vec![Some("Pa".to_string())]);
}

#[test]
fn tabs_quotes_comments_and_blank_lines() {
    let r = ok("# DAQ export\n\nmic1 (V)\tmic2 (V)\n1.5\t-2\n\n2.5\t3e-3\n", &opts(Some(48_000.0)));
    assert_eq!((r.delimiter, r.samples.channel_count, r.rows), (b'\t', 2, 2));
    assert_eq!(values(&r), vec![1.5, 2.5, -2.0, 3e-3]);
    assert_eq!(r.units, vec![Some("V".to_string()), Some("V".to_string())]);
    // Quoted header names with commas and quotes inside (RFC 4180: "" is one quote).
    let r = ok("\"p, mic \"\"A\"\" [Pa]\",\"p, mic B\"\n1,2\n3,4\n", &opts(Some(1.0)));
    assert_eq!(r.samples.channel_names, vec!["p, mic \"A\" [Pa]".to_string(), "p, mic B".to_string()]);
    assert_eq!(values(&r), vec![1.0, 3.0, 2.0, 4.0]);
    // Quoted decimal commas in a comma-separated file, with both flags.
    let o = CsvOptions { delimiter: Some(b','), decimal_comma: true, ..opts(Some(1.0)) };
    assert_eq!(values(&ok("\"0,5\",\"1,25\"\n", &o)), vec![0.5, 1.25]);
}

#[test]
fn a_time_column_gives_the_rate_and_is_not_a_channel() {
    // Stamps i / 51200 s printed to 1 us (as a DAQ writing %.6f does): the mean step gives
    // 51200 Hz to within one printed digit over the file, 1e-6 s / (99 x 1/51200 s).
    let mut text = String::from("time_s,p_pa\n");
    for i in 0..100 {
        text.push_str(&format!("{:.6},{}\n", i as f64 / 51_200.0, (i % 7) as f64 - 3.0));
    }
    let r = ok(&text, &opts(None));
    let fs = r.samples.sample_rate_hz;
    assert!((fs - 51_200.0).abs() / 51_200.0 < 1e-6 / (99.0 / 51_200.0), "{fs}");
    assert_eq!((r.samples.channel_count, r.samples.channel_names.clone()), (1, vec!["p_pa".to_string()]));
    assert_eq!(values(&r)[..3], [-3.0, -2.0, -1.0]);
    let t = r.time.expect("time column");
    // Tolerance: 2 x 1e-6 s printed resolution + 1 % of the step (see csv_input/time.rs).
    assert!((t.tolerance_s - (2e-6 + 0.01 / fs)).abs() < 1e-15, "{}", t.tolerance_s);
    // A given rate that agrees is used as given; one that does not is refused, naming both.
    assert_eq!(ok(&text, &opts(Some(51_200.0))).samples.sample_rate_hz, 51_200.0);
    let e = err(&text, &opts(Some(48_000.0)));
    assert!(e.contains("--sample-rate-hz 48000 disagrees") && e.contains(&format!("gives {fs} Hz")), "{e}");
    // --no-time-column: the time is a channel and the rate must be given.
    let o = CsvOptions { time_column: TimeColumn::None, ..opts(None) };
    assert!(err(&text, &o).contains("give --sample-rate-hz"));
    let o = CsvOptions { time_column: TimeColumn::None, ..opts(Some(51_200.0)) };
    assert_eq!(ok(&text, &o).samples.channel_count, 2);
}

#[test]
fn time_columns_by_name_position_and_unit() {
    for header in ["time", "T", "time_s", "time [s]", "Time (s)", "zeit", "Zeit/s", "t_ms", "temps (ms)"] {
        assert!(time::is_time_name(header), "{header}");
    }
    for header in ["timestamp", "p1", "mic_t", "temperature [K]"] {
        assert!(!time::is_time_name(header), "{header}");
    }
    // No header: --time-column 2 (1-based) in seconds; 1 / 0.25 s = 4 Hz.
    let o = CsvOptions { time_column: TimeColumn::parse("2"), ..opts(None) };
    let r = ok("7,0\n8,0.25\n9,0.5\n", &o);
    assert_eq!((r.samples.sample_rate_hz, values(&r)), (4.0, vec![7.0, 8.0, 9.0]));
    // By name, case-insensitive, without its unit.
    let o = CsvOptions { time_column: TimeColumn::parse("CLOCK"), ..opts(None) };
    assert!((ok("p,clock [us]\n1,0\n2,10\n", &o).samples.sample_rate_hz - 1e5).abs() < 1e-6);
    let e = err("p,q\n1,0\n", &o);
    assert!(e.contains("--time-column 'CLOCK': no such column (header: p, q)"), "{e}");
    let e = err("time [h],p\n0,1\n1,2\n", &opts(None));
    assert!(e.contains("unit 'h' is not a time unit"), "{e}");
}

#[test]
fn a_non_uniform_time_column_is_refused_at_its_first_bad_row() {
    // Row 5 of the file (after a header and a comment) repeats the stamp of row 4.
    let e = err("time,p\n# start\n0.0000,1\n0.0010,2\n0.0010,3\n0.0020,4\n0.0030,5\n", &opts(None));
    assert!(e.contains("is not uniform: row 5 is 0e0 s after the row before"), "{e}");
    // One sample missing between rows 4 and 5: a step of two periods.
    let e = err("t,p\n0.0000,1\n0.0010,2\n0.0020,3\n0.0040,4\n0.0050,5\n", &opts(None));
    assert!(e.contains("row 5 is 2e-3 s after"), "{e}");
    // Printed to a whole step (1 ms stamps at 1 kHz): still exact, still read; a repeated
    // stamp is still refused, as the tolerance stays under half a period.
    assert_eq!(ok("t,p\n0.000,1\n0.001,2\n0.002,3\n", &opts(None)).samples.sample_rate_hz, 1000.0);
    assert!(err("t,p\n0.000,1\n0.001,2\n0.001,3\n0.002,4\n", &opts(None)).contains("row 4 is 0e0 s"));
    // Going backwards everywhere.
    let e = err("t,p\n3,1\n2,2\n1,3\n", &opts(None));
    assert!(e.contains("does not increase: row 3"), "{e}");
    // Steps of 1 ms, then 1.015 ms: each step is within 2 % but the grid drifts.
    let mut text = String::from("t,p\n");
    let mut t = 0.0;
    for i in 0..40 {
        text.push_str(&format!("{t:.7},{i}\n"));
        t += if i < 20 { 1e-3 } else { 1.009e-3 };
    }
    let e = err(&text, &opts(None));
    assert!(e.contains("off the grid"), "{e}");
}

#[test]
fn mean_step_against_median_step_for_stamps_printed_to_one_us() {
    // 51.2 kHz stamps rounded to 1 us: the steps are 19 or 20 us, their median 20 us
    // (50 kHz, closed form), while the mean step over 1000 rows is 1/51200 s to 1 us / 999.
    let t: Vec<f64> = (0..1000).map(|i| (i as f64 / 51_200.0 * 1e6).round() * 1e-6).collect();
    let fit = uniform_step(&t, 1e-6).expect("uniform");
    assert!((fit.step_s - 1.0 / 51_200.0).abs() <= 1e-6 / 999.0, "{}", fit.step_s);
    assert!((resolution("0.000020") - 1e-6).abs() < 1e-18);
    assert!((resolution("1.953125e-05") - 1e-11).abs() < 1e-24);
    assert_eq!((resolution("12"), resolution("0,25")), (1.0, 0.01));
}

#[test]
fn a_header_of_another_width_mixed_marks_and_words_are_refused_by_row_and_column() {
    let e = err("a,b,c\n1,2\n3,4\n", &opts(Some(1.0)));
    assert!(e.contains("the header (row 1) has 3 column(s) but the data rows have 2"), "{e}");
    let e = err("p\n0,5\n1,5\n2,5\n", &CsvOptions { delimiter: Some(b','), ..opts(Some(1.0)) });
    assert!(e.contains("has 1 column(s) but the data rows have 2") && e.contains("--decimal-comma"), "{e}");
    let e = err("p1;p2\n0,5;1,5\n0.5;2,5\n", &opts(Some(1.0)));
    assert!(
        e.contains("row 3, column 1 (A, 'p1'): '0.5' uses a decimal point, but row 2, column 1 (A) uses decimal commas"),
        "{e}"
    );
    let o = CsvOptions { decimal_comma: true, ..opts(Some(1.0)) };
    assert!(
        err("1;2.5\n", &o).contains("row 1, column 2 (B): '2.5' uses a decimal point, but --decimal-comma")
    );
    let e = err("p1,p2\n1,2\n3,4\n5,x\n", &opts(Some(1.0)));
    assert!(e.contains("m.csv: row 4, column 2 (B, 'p2'): 'x' is not a number"), "{e}");
    let e = err("1,2\n3,4,5\n", &opts(Some(1.0)));
    assert!(e.contains("row 2 has 3 column(s), the rows above have 2"), "{e}");
    assert!(err("p1;p2\n1;1.234,5\n", &opts(Some(1.0))).contains("both a decimal point and a comma"));
    assert!(err("1,,3\n", &opts(Some(1.0))).contains("column 2 (B): empty cell"));
    assert!(err("1,nan\n", &opts(Some(1.0))).contains("'nan' is not a number"));
    let e = err("time_s\n0\n1\n", &opts(None));
    assert!(e.contains("no channel besides the time column"), "{e}");
    let e = read(Path::new("m.csv"), b"p\n1\n\xff2\n", &opts(Some(1.0)), cal()).unwrap_err();
    assert!(matches!(e, Failure::Usage(ref m) if m.contains("byte offset 4")), "{e:?}");
}

#[test]
fn generic_rows_keep_one_delimiter_per_file() {
    let rows = rows("x;f;dir\n# note\n3,0;5230;\"up; then down\"\n");
    assert_eq!(rows[0], (0, vec!["x".to_string(), "f".into(), "dir".into()]));
    assert_eq!(rows[1], (2, vec!["3,0".to_string(), "5230".into(), "up; then down".into()]));
    assert_eq!(detect_delimiter("a\tb\n1\t2\n", false), b'\t');
    assert_eq!(column_letters(1) + &column_letters(26) + &column_letters(27), "AZAA");
    assert_eq!(column_letters(703), "AAA", "bijective base 26, as spreadsheets name columns");
    assert_eq!(split_unit("p / Pa"), ("p", Some("Pa")));
}
