//! SVG plots: one small canvas with axes, grid, labelled ticks, series and a legend, used by
//! every command that draws (spectra, stage maps).

use std::fmt::Write;
use std::path::Path;

/// The font every plot is drawn with, built into the binary so a machine without fonts draws
/// the same PNG (DejaVu Sans; Bitstream Vera licence, see assets/DejaVuSans-LICENSE.txt).
pub(crate) static FONT: &[u8] = include_bytes!("../../assets/DejaVuSans.ttf");

/// Rasterizes an SVG document drawn by [`Plot`] to PNG bytes at its own size.
///
/// # Errors
/// A sentence when the SVG cannot be read or the image cannot be encoded.
pub fn png_of(svg: &str) -> Result<Vec<u8>, String> {
    use resvg::{tiny_skia, usvg};
    let mut fonts = usvg::fontdb::Database::new();
    fonts.load_font_data(FONT.to_vec());
    fonts.set_sans_serif_family("DejaVu Sans");
    let opt = usvg::Options { fontdb: std::sync::Arc::new(fonts), ..usvg::Options::default() };
    let tree = usvg::Tree::from_str(svg, &opt).map_err(|e| format!("plot SVG not readable: {e}"))?;
    let size = tree.size().to_int_size();
    let mut pixmap =
        tiny_skia::Pixmap::new(size.width(), size.height()).ok_or_else(|| "plot has no size".to_string())?;
    resvg::render(&tree, tiny_skia::Transform::default(), &mut pixmap.as_mut());
    pixmap.encode_png().map_err(|e| format!("PNG encoding failed: {e}"))
}

/// Writes a plot to `path`: PNG when the name ends in `.png`, the SVG document otherwise.
///
/// # Errors
/// A sentence naming the file when it cannot be written.
pub fn write_plot(path: &Path, svg: &str) -> Result<(), String> {
    let png = path.extension().and_then(|e| e.to_str()).is_some_and(|e| e.eq_ignore_ascii_case("png"));
    let bytes = if png { png_of(svg)? } else { svg.as_bytes().to_vec() };
    std::fs::write(path, bytes).map_err(|e| format!("cannot write {}: {e}", path.display()))
}

/// Colours of successive series (stages, channels).
pub const COLOURS: [&str; 8] =
    ["#1f5fa8", "#c0392b", "#27ae60", "#8e44ad", "#d35400", "#16a085", "#7f8c8d", "#b7950b"];

/// How an axis maps values to the page.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scale {
    /// Linear.
    Linear,
    /// Base-ten logarithmic (values must be positive).
    Log,
}

/// One axis: its range, scale and label.
#[derive(Debug, Clone)]
pub struct Axis {
    /// Lowest value shown.
    pub min: f64,
    /// Highest value shown.
    pub max: f64,
    /// Scale.
    pub scale: Scale,
    /// Label with unit, e.g. "frequency \[Hz\]".
    pub label: String,
}

impl Axis {
    /// A linear axis over the data range `lo..hi`, widened to whole "nice" ticks.
    pub fn linear(lo: f64, hi: f64, label: impl Into<String>) -> Self {
        let (lo, hi) = if hi > lo { (lo, hi) } else { (lo - 0.5, lo + 0.5) };
        let step = nice_step((hi - lo) / 5.0);
        Self {
            min: (lo / step).floor() * step,
            max: (hi / step).ceil() * step,
            scale: Scale::Linear,
            label: label.into(),
        }
    }

    /// A logarithmic axis over `lo..hi` (both positive).
    pub fn log(lo: f64, hi: f64, label: impl Into<String>) -> Self {
        Self { min: lo, max: hi.max(lo * 1.000_001), scale: Scale::Log, label: label.into() }
    }

    /// Where `v` lies along the axis, 0 at its minimum and 1 at its maximum.
    fn frac(&self, v: f64) -> f64 {
        match self.scale {
            Scale::Linear => (v - self.min) / (self.max - self.min),
            Scale::Log => (v.log10() - self.min.log10()) / (self.max.log10() - self.min.log10()),
        }
    }

    /// Tick values with their labels: multiples of a 1-2-5 step (linear), or 1, 2, 5 per
    /// decade (log).
    pub fn ticks(&self) -> Vec<(f64, String)> {
        match self.scale {
            Scale::Linear => {
                let step = nice_step((self.max - self.min) / 5.0);
                let first = (self.min / step).ceil() as i64;
                let last = (self.max / step + 1e-9).floor() as i64;
                (first..=last).map(|k| k as f64 * step).map(|v| (v, number(v, step))).collect()
            }
            Scale::Log => {
                let mut out = Vec::new();
                let mut dec = 10f64.powf(self.min.log10().floor());
                while dec <= self.max {
                    for m in [1.0, 2.0, 5.0] {
                        let f = dec * m;
                        if f >= self.min && f <= self.max {
                            let label = if f >= 1000.0 { format!("{}k", f / 1000.0) } else { format!("{f}") };
                            out.push((f, label));
                        }
                    }
                    dec *= 10.0;
                }
                out
            }
        }
    }
}

/// The 1, 2 or 5 times a power of ten nearest above `raw`.
pub(crate) fn nice_step(raw: f64) -> f64 {
    if !raw.is_finite() || raw <= 0.0 {
        return 1.0;
    }
    let p = 10f64.powf(raw.log10().floor());
    [1.0, 2.0, 5.0, 10.0].into_iter().map(|m| m * p).find(|s| *s >= raw * 0.999).unwrap_or(10.0 * p)
}

/// A tick label with as many decimals as the step needs, in plain notation.
pub(crate) fn number(v: f64, step: f64) -> String {
    let decimals = if step >= 1.0 { 0 } else { (-step.log10().floor()) as usize };
    format!("{v:.decimals$}")
}

/// Escapes text for SVG.
pub fn escape(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;")
}

/// A plot being drawn.
#[derive(Debug)]
pub struct Plot {
    /// Page width, px.
    w: f64,
    /// Page height, px.
    h: f64,
    /// Left margin (to the plot area), px.
    left: f64,
    /// Right margin, px.
    right: f64,
    /// Top margin, px.
    top: f64,
    /// Bottom margin, px.
    bottom: f64,
    /// The horizontal axis.
    x: Axis,
    /// The vertical axis.
    y: Axis,
    /// The SVG drawn so far.
    body: String,
    /// Legend entries: label, colour and marker name.
    legend: Vec<(String, String, &'static str)>,
    /// Page positions of the data drawn, to place the legend where it hides the least.
    drawn: Vec<(f64, f64)>,
}

impl Plot {
    /// A `w` x `h` plot titled `title` with the two axes, grid and tick labels drawn.
    pub fn new(title: &str, w: f64, h: f64, x: Axis, y: Axis) -> Self {
        let mut p = Self {
            w,
            h,
            left: 80.0,
            right: 30.0,
            top: 40.0,
            bottom: 50.0,
            x,
            y,
            body: String::new(),
            legend: Vec::new(),
            drawn: Vec::new(),
        };
        let _ = writeln!(p.body, "<text x=\"{}\" y=\"22\" font-size=\"14\">{}</text>", p.left, escape(title));
        let (l, r, t, b) = (p.left, p.w - p.right, p.top, p.h - p.bottom);
        for (v, label) in p.x.ticks() {
            let xx = p.px(v);
            let _ = writeln!(
                p.body,
                "<line x1=\"{xx:.1}\" y1=\"{t}\" x2=\"{xx:.1}\" y2=\"{b:.1}\" stroke=\"#ddd\"/>\
                 <text x=\"{xx:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{label}</text>",
                b + 16.0
            );
        }
        for (v, label) in p.y.ticks() {
            let yy = p.py(v);
            let _ = writeln!(
                p.body,
                "<line x1=\"{l}\" y1=\"{yy:.1}\" x2=\"{r:.1}\" y2=\"{yy:.1}\" stroke=\"#ddd\"/>\
                 <text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{label}</text>",
                l - 6.0,
                yy + 4.0
            );
        }
        let _ = writeln!(
            p.body,
            "<text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>\
             <text transform=\"translate(16 {:.1}) rotate(-90)\" text-anchor=\"middle\">{}</text>",
            (l + r) / 2.0,
            p.h - 10.0,
            escape(&p.x.label),
            (t + b) / 2.0,
            escape(&p.y.label)
        );
        p
    }

    /// Page x of value `v`.
    pub fn px(&self, v: f64) -> f64 {
        self.left + self.x.frac(v) * (self.w - self.left - self.right)
    }

    /// Page y of value `v`.
    pub fn py(&self, v: f64) -> f64 {
        self.top + (1.0 - self.y.frac(v)) * (self.h - self.top - self.bottom)
    }

    /// True when (x, y) lies inside the axes.
    pub fn inside(&self, x: f64, y: f64) -> bool {
        (0.0..=1.0).contains(&self.x.frac(x)) && (0.0..=1.0).contains(&self.y.frac(y))
    }

    /// A line through the points, with a legend entry when `label` is given.
    pub fn line(&mut self, pts: &[(f64, f64)], colour: &str, dashed: bool, label: Option<&str>) {
        let page: Vec<(f64, f64)> = pts
            .iter()
            .filter(|(x, y)| self.inside(*x, *y))
            .map(|(x, y)| (self.px(*x), self.py(*y)))
            .collect();
        let coords: Vec<String> = page.iter().map(|(x, y)| format!("{x:.1},{y:.1}")).collect();
        self.drawn.extend(page);
        let dash = if dashed { " stroke-dasharray=\"4 3\"" } else { "" };
        let _ = writeln!(
            self.body,
            "<polyline fill=\"none\" stroke=\"{colour}\" stroke-width=\"1\"{dash} points=\"{}\"/>",
            coords.join(" ")
        );
        if let Some(l) = label {
            self.legend.push((l.to_string(), colour.to_string(), if dashed { "dash" } else { "line" }));
        }
    }

    /// A shaded band between `lower` and `upper` (same x values, in order), values clamped to
    /// the axes, with a legend entry when `label` is given.
    pub fn band(&mut self, lower: &[(f64, f64)], upper: &[(f64, f64)], colour: &str, label: Option<&str>) {
        if lower.len() < 2 || lower.len() != upper.len() {
            return;
        }
        let clamp = |p: &Self, (x, y): (f64, f64)| {
            let fx = p.x.frac(x).clamp(0.0, 1.0);
            let fy = p.y.frac(y).clamp(0.0, 1.0);
            let w = p.w - p.left - p.right;
            let h = p.h - p.top - p.bottom;
            format!("{:.1},{:.1}", p.left + fx * w, p.top + (1.0 - fy) * h)
        };
        let mut pts: Vec<String> = lower.iter().map(|q| clamp(self, *q)).collect();
        pts.extend(upper.iter().rev().map(|q| clamp(self, *q)));
        let _ = writeln!(
            self.body,
            "<polygon fill=\"{colour}\" fill-opacity=\"0.18\" stroke=\"{colour}\" stroke-opacity=\"0.5\" stroke-width=\"0.5\" points=\"{}\"/>",
            pts.join(" ")
        );
        if let Some(l) = label {
            self.legend.push((l.to_string(), colour.to_string(), "band"));
        }
    }

    /// A marker at each point: filled circles, open circles or crosses.
    pub fn markers(&mut self, pts: &[(f64, f64)], colour: &str, kind: Marker, label: Option<&str>) {
        let page: Vec<(f64, f64)> =
            pts.iter().filter(|(x, y)| self.inside(*x, *y)).map(|&(x, y)| (self.px(x), self.py(y))).collect();
        let shapes: Vec<String> = page.iter().map(|&(x, y)| kind.svg(x, y, colour)).collect();
        self.drawn.extend(page);
        for shape in shapes {
            let _ = writeln!(self.body, "{shape}");
        }
        if let Some(l) = label {
            self.legend.push((l.to_string(), colour.to_string(), kind.name()));
        }
    }

    /// Text at a data point, offset up and right, or up and left where it would run past the
    /// right edge of the frame.
    pub fn label(&mut self, x: f64, y: f64, text: &str, colour: &str) {
        let (px, py) = (self.px(x), self.py(y));
        let fits_right = px + 6.0 + 6.6 * text.chars().count() as f64 <= self.w - self.right;
        let (tx, anchor) = if fits_right { (px + 6.0, "start") } else { (px - 6.0, "end") };
        let _ = writeln!(
            self.body,
            "<text x=\"{tx:.1}\" y=\"{:.1}\" text-anchor=\"{anchor}\" fill=\"{colour}\">{}</text>",
            py - 6.0,
            escape(text)
        );
    }

    /// The finished SVG document, legend and frame last.
    pub fn finish(mut self) -> String {
        // Legend inside the frame, in the corner where it hides the fewest data points, on a
        // white box so data under it stays readable.
        let longest = self.legend.iter().map(|(l, _, _)| l.chars().count()).max().unwrap_or(0);
        let (bw, bh) = (30.0 + 6.6 * longest as f64, 8.0 + 16.0 * self.legend.len() as f64);
        let (l, r, top, bottom) = (
            self.left + 6.0,
            self.w - self.right - 6.0 - bw,
            self.top + 4.0,
            self.h - self.bottom - 4.0 - bh,
        );
        let hidden = |x0: f64, y0: f64| {
            self.drawn.iter().filter(|(x, y)| *x >= x0 && *x <= x0 + bw && *y >= y0 && *y <= y0 + bh).count()
        };
        let (bx, by) = [(l, top), (r, top), (l, bottom), (r, bottom)]
            .into_iter()
            .min_by_key(|&(x, y)| hidden(x, y))
            .unwrap_or((l, top));
        if !self.legend.is_empty() {
            let _ = writeln!(
                self.body,
                "<rect x=\"{bx:.1}\" y=\"{by:.1}\" width=\"{bw:.1}\" height=\"{bh:.1}\" fill=\"white\" fill-opacity=\"0.85\" stroke=\"#ccc\"/>",
            );
        }
        for (i, (label, colour, kind)) in self.legend.iter().enumerate() {
            let y = by + 16.0 + 16.0 * i as f64;
            let x = bx + 6.0;
            let mark = match *kind {
                "line" => format!("<line x1=\"{x}\" y1=\"{0:.1}\" x2=\"{1}\" y2=\"{0:.1}\" stroke=\"{colour}\"/>", y - 4.0, x + 16.0),
                "band" => format!(
                    "<rect x=\"{x}\" y=\"{:.1}\" width=\"16\" height=\"8\" fill=\"{colour}\" fill-opacity=\"0.3\" stroke=\"{colour}\"/>",
                    y - 8.0
                ),
                "dash" => format!(
                    "<line x1=\"{x}\" y1=\"{0:.1}\" x2=\"{1}\" y2=\"{0:.1}\" stroke=\"{colour}\" stroke-dasharray=\"4 3\"/>",
                    y - 4.0,
                    x + 16.0
                ),
                other => Marker::from_name(other).svg(x + 8.0, y - 4.0, colour),
            };
            let _ = writeln!(
                self.body,
                "{mark}<text x=\"{:.1}\" y=\"{y:.1}\" fill=\"{colour}\">{}</text>",
                x + 22.0,
                escape(label)
            );
        }
        let t = self.top;
        format!(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" font-family=\"sans-serif\" font-size=\"12\">\n\
             <rect width=\"100%\" height=\"100%\" fill=\"white\"/>\n{body}\
             <rect x=\"{l}\" y=\"{t}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"none\" stroke=\"#333\"/>\n</svg>\n",
            self.w - self.left - self.right,
            self.h - self.top - self.bottom,
            w = self.w,
            h = self.h,
            body = self.body,
            l = self.left,
        )
    }
}

/// Marker shapes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Marker {
    /// Filled circle.
    Dot,
    /// Open circle.
    Ring,
    /// Small cross.
    Cross,
    /// Upward triangle.
    Up,
    /// Downward triangle.
    Down,
}

impl Marker {
    /// The marker's name (for legend entries).
    fn name(self) -> &'static str {
        match self {
            Marker::Dot => "dot",
            Marker::Ring => "ring",
            Marker::Cross => "cross",
            Marker::Up => "up",
            Marker::Down => "down",
        }
    }

    /// The marker a name stands for (a dot for an unknown name).
    fn from_name(n: &str) -> Self {
        match n {
            "ring" => Marker::Ring,
            "cross" => Marker::Cross,
            "up" => Marker::Up,
            "down" => Marker::Down,
            _ => Marker::Dot,
        }
    }

    /// The marker centred at (`cx`, `cy`) px in `colour`, as SVG.
    fn svg(self, cx: f64, cy: f64, colour: &str) -> String {
        match self {
            Marker::Dot => format!("<circle cx=\"{cx:.1}\" cy=\"{cy:.1}\" r=\"3\" fill=\"{colour}\"/>"),
            Marker::Ring => format!(
                "<circle cx=\"{cx:.1}\" cy=\"{cy:.1}\" r=\"4\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.5\"/>"
            ),
            Marker::Cross => format!(
                "<path d=\"M{:.1} {cy:.1}h6M{cx:.1} {:.1}v6\" stroke=\"{colour}\" stroke-width=\"0.8\"/>",
                cx - 3.0,
                cy - 3.0
            ),
            Marker::Up => format!(
                "<path d=\"M{cx:.1} {:.1}l3.5 6h-7z\" fill=\"{colour}\"/>",
                cy - 3.5
            ),
            Marker::Down => format!(
                "<path d=\"M{cx:.1} {:.1}l3.5 -6h-7z\" fill=\"{colour}\"/>",
                cy + 3.5
            ),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn linear_ticks_are_round_1_2_5_steps_inside_the_axis() {
        let a = Axis::linear(1.93, 3.47, "NPR");
        let t = a.ticks();
        assert_eq!(t.first().unwrap().1, "1.5");
        assert_eq!(t.last().unwrap().1, "3.5");
        assert!(t.iter().all(|(v, _)| *v >= a.min - 1e-12 && *v <= a.max + 1e-12));
        let b = Axis::linear(3812.0, 6190.0, "f");
        assert!(b.ticks().iter().all(|(_, l)| !l.contains('.')), "{:?}", b.ticks());
    }

    #[test]
    fn plot_is_one_svg_document_with_legend_entries() {
        let mut p = Plot::new(
            "t <1>",
            600.0,
            400.0,
            Axis::log(10.0, 1e5, "frequency [Hz]"),
            Axis::linear(0.0, 100.0, "dB"),
        );
        p.line(&[(100.0, 10.0), (1000.0, 50.0)], COLOURS[0], false, Some("PSD"));
        p.markers(&[(500.0, 40.0)], COLOURS[1], Marker::Ring, Some("tones"));
        let s = p.finish();
        assert_eq!(s.matches("<svg").count(), 1);
        assert!(s.contains("t &lt;1&gt;") && s.contains(">PSD<") && s.contains(">tones<"));
    }
}
