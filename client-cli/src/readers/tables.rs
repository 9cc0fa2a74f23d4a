//! Tables read from CSV files that are not recordings: response-correction curves and
//! measured sweeps.

use super::csv::csv_rows;
use crate::failure::Failure;
use jetloop_proto::pb;
use std::path::PathBuf;

/// Reads a response curve CSV (header row, then frequency_hz,correction_db); the curve is
/// named after the file.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be read or a line is not two numbers.
pub(crate) fn read_curve(path: &std::path::Path) -> Result<pb::ResponseCurve, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
    let (mut frequencies_hz, mut corrections_db) = (Vec::new(), Vec::new());
    let mut header = false;
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let cells: Vec<&str> = line.split(',').map(str::trim).collect();
        match (cells.first().map(|c| c.parse::<f64>()), cells.get(1).map(|c| c.parse::<f64>())) {
            (Some(Ok(f)), Some(Ok(db))) if cells.len() == 2 => {
                frequencies_hz.push(f);
                corrections_db.push(db);
            }
            _ if frequencies_hz.is_empty() && !header => header = true, // the header row
            _ => {
                return Err(Failure::Usage(format!(
                    "{} line {}: expected frequency_hz,correction_db",
                    path.display(),
                    i + 1
                )))
            }
        }
    }
    let name = path.file_stem().and_then(|s| s.to_str()).unwrap_or("curve").chars().take(64).collect();
    Ok(pb::ResponseCurve { name, frequencies_hz, corrections_db })
}

/// The sweep direction a CSV cell names: up/increasing/+/inc, down/decreasing/-/dec, or
/// empty (unknown); `None` for anything else.
pub(crate) fn direction(s: &str) -> Option<pb::SweepDirection> {
    match s.trim().to_ascii_lowercase().as_str() {
        "up" | "increasing" | "+" | "inc" => Some(pb::SweepDirection::Increasing),
        "down" | "decreasing" | "-" | "dec" => Some(pb::SweepDirection::Decreasing),
        "" => Some(pb::SweepDirection::Unspecified),
        _ => None,
    }
}

/// The points of a measured sweep: CSV of x, frequency_hz [, level_db [, direction]] in
/// acquisition order (a header row is skipped).
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be read, or a line after the first point has no
/// numbers for x and frequency or an unknown direction (the line is named).
pub(crate) fn read_points(path: &PathBuf) -> Result<Vec<pb::MeasuredTone>, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
    let mut out = Vec::new();
    for (i, cells) in csv_rows(&text) {
        let (Ok(x), Ok(f)) =
            (cells[0].parse::<f64>(), cells.get(1).map_or("", String::as_str).parse::<f64>())
        else {
            if out.is_empty() {
                continue; // header
            }
            return Err(Failure::Usage(format!(
                "{} line {}: x and frequency must be numbers",
                path.display(),
                i + 1
            )));
        };
        let level_db = cells.get(2).and_then(|c| c.parse::<f64>().ok());
        let dir = match cells.get(3) {
            None => pb::SweepDirection::Unspecified,
            Some(c) => direction(c).ok_or_else(|| {
                Failure::Usage(format!("{} line {}: direction '{c}' is not up/down", path.display(), i + 1))
            })?,
        };
        out.push(pb::MeasuredTone {
            x,
            frequency_hz: f,
            level_db,
            frequency_uncertainty_hz: None,
            direction: dir as i32,
            acquisition_index: Some(out.len() as u64),
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    //! Curve and sweep files -> messages, without a server.

    use super::*;

    /// A fresh folder for one test's files.
    fn folder(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("jetloop-readers-{name}-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        dir
    }

    #[test]
    fn a_response_curve_file_is_read_with_its_header_and_a_bad_line_is_named() {
        let dir = folder("curve");
        let good = dir.join("quarter-inch.csv");
        std::fs::write(&good, "frequency_hz,correction_db\n1000,0.1\n10000,1.5\n").expect("write");
        let c = read_curve(&good).expect("curve");
        assert_eq!(
            (c.name.as_str(), c.frequencies_hz, c.corrections_db),
            ("quarter-inch", vec![1000.0, 10000.0], vec![0.1, 1.5])
        );
        let bad = dir.join("bad.csv");
        std::fs::write(&bad, "frequency_hz,correction_db\n1000,0.1\n2000\n").expect("write");
        let e = read_curve(&bad).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("line 3")), "{e:?}");
        let _ = std::fs::remove_dir_all(dir);
    }

    #[test]
    fn sweep_points_keep_their_order_level_and_direction_after_a_header() {
        let dir = folder("points");
        let f = dir.join("sweep.csv");
        std::fs::write(
            &f,
            "npr,frequency_hz,level_db,direction\n3.0,5230,131.5,up\n3.1,5100,,down\n3.2,4900\n",
        )
        .expect("write");
        let p = read_points(&f).expect("points");
        assert_eq!(p.len(), 3);
        assert_eq!((p[0].x, p[0].frequency_hz, p[0].level_db), (3.0, 5230.0, Some(131.5)));
        assert_eq!(p[0].direction, pb::SweepDirection::Increasing as i32);
        assert_eq!((p[1].level_db, p[1].direction), (None, pb::SweepDirection::Decreasing as i32));
        assert_eq!(
            (p[2].direction, p[2].acquisition_index),
            (pb::SweepDirection::Unspecified as i32, Some(2))
        );
        std::fs::write(&f, "3.0,5230,130,sideways\n").expect("write");
        let e = read_points(&f).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("line 1: direction 'sideways'")), "{e:?}");
        assert_eq!(direction(" DEC "), Some(pb::SweepDirection::Decreasing));
        let _ = std::fs::remove_dir_all(dir);
    }
}
