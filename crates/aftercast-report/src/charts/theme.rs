//! The visual identity shared by every chart: palette, type sizes, the embedded font and the
//! number formats of axis ticks.

use plotters::style::{FontDesc, FontFamily, FontStyle, RGBColor, TextStyle};
use std::sync::OnceLock;

/// Warm paper background.
pub const PAPER: RGBColor = RGBColor(251, 249, 244);
/// Ink: the observed / treated series, titles.
pub const INK: RGBColor = RGBColor(27, 36, 48);
/// Secondary text, axis labels, placebo lines.
pub const MUTED: RGBColor = RGBColor(104, 112, 122);
/// Grid lines.
pub const GRID: RGBColor = RGBColor(226, 221, 211);
/// Tint of the period after the change.
pub const POST_TINT: RGBColor = RGBColor(242, 236, 224);
/// Terracotta: counterfactual, synthetic unit, treated group.
pub const CLAY: RGBColor = RGBColor(196, 84, 58);
/// Green-teal: effects, highest-density intervals.
pub const TEAL: RGBColor = RGBColor(34, 122, 96);
/// Slate blue: running totals, control group, weights.
pub const SLATE: RGBColor = RGBColor(58, 88, 130);
/// Ochre: ROPE and experimental truth.
pub const OCHRE: RGBColor = RGBColor(205, 150, 40);
/// Brick: thresholds and warnings.
pub const BRICK: RGBColor = RGBColor(168, 52, 60);

/// A sequence of distinct hues for several lines of one kind (e.g. power by post length).
pub const SEQUENCE: [RGBColor; 6] = [
    RGBColor(58, 88, 130),
    RGBColor(34, 122, 96),
    RGBColor(196, 84, 58),
    RGBColor(205, 150, 40),
    RGBColor(120, 84, 140),
    RGBColor(27, 36, 48),
];

/// Title size (px).
pub const TITLE_SIZE: f64 = 22.0;
/// Caption size (px).
pub const CAPTION_SIZE: f64 = 14.0;
/// Tick-label size (px).
pub const TICK_SIZE: f64 = 13.0;
/// Legend and annotation size (px).
pub const NOTE_SIZE: f64 = 13.0;

static FONTS: OnceLock<bool> = OnceLock::new();

/// Register the embedded DejaVu Sans (regular and bold) as plotters' `sans-serif` family.
/// Without it the bitmap backend cannot lay out any text. Returns whether it worked.
pub fn ensure_fonts() -> bool {
    *FONTS.get_or_init(|| {
        let regular = plotters::style::register_font("sans-serif", FontStyle::Normal, dejavu::sans::regular()).is_ok();
        let bold = plotters::style::register_font("sans-serif", FontStyle::Bold, dejavu::sans::bold()).is_ok();
        regular && bold
    })
}

/// A text style of the chart family.
pub fn font(size: f64, bold: bool, color: &RGBColor) -> TextStyle<'static> {
    let style = if bold { FontStyle::Bold } else { FontStyle::Normal };
    FontDesc::new(FontFamily::SansSerif, size, style).color(color)
}

/// How the values of an axis are written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ValueFormat {
    /// Plain numbers, grouped, with k/M for large magnitudes.
    Number,
    /// Fractions written as percentages (0.05 -> 5%).
    Percent,
    /// Probabilities / shares in [0, 1] written with two decimals.
    Share,
}

/// Decimals that resolve a tick step of `span / 5`.
fn decimals_for(span: f64) -> usize {
    if !(span.is_finite() && span > 0.0) {
        return 2;
    }
    let step = span / 5.0;
    if step >= 1.0 { 0 } else { (1.0 - step.log10().floor()).clamp(0.0, 6.0) as usize }
}

/// Format a tick value on an axis spanning `span`. A value that rounds to zero is written
/// "0" (never "-0%", "0k" or "-0.00").
pub fn fmt_tick(v: f64, span: f64, format: ValueFormat) -> String {
    if !v.is_finite() {
        return String::new();
    }
    let text = tick_text(v, span, format);
    let digits_zero = text.chars().filter(char::is_ascii_digit).all(|c| c == '0');
    if !digits_zero {
        return text;
    }
    match format {
        ValueFormat::Percent => "0%".into(),
        ValueFormat::Share => text.trim_start_matches('-').to_string(),
        ValueFormat::Number => "0".into(),
    }
}

fn tick_text(v: f64, span: f64, format: ValueFormat) -> String {
    match format {
        ValueFormat::Percent => {
            let d = decimals_for(span * 100.0);
            format!("{:.*}%", d, v * 100.0)
        }
        ValueFormat::Share => format!("{:.*}", decimals_for(span).max(1), v),
        ValueFormat::Number => {
            let a = v.abs();
            let big = span.abs().max(a);
            if big >= 1e6 {
                format!("{:.*}M", decimals_for(span / 1e6), v / 1e6)
            } else if big >= 1e4 {
                format!("{:.*}k", decimals_for(span / 1e3), v / 1e3)
            } else {
                let s = format!("{:.*}", decimals_for(span), v);
                if s.starts_with('-') && s.trim_start_matches(['-', '0', '.']).is_empty() {
                    s[1..].to_string()
                } else {
                    s
                }
            }
        }
    }
}

/// Format a value for an annotation (the interval numbers drawn in a chart).
pub fn fmt_value(v: f64, format: ValueFormat) -> String {
    match format {
        ValueFormat::Percent => crate::numbers::percent(v),
        ValueFormat::Share => {
            if v.is_finite() {
                format!("{v:.3}")
            } else {
                "n/a".into()
            }
        }
        ValueFormat::Number => crate::numbers::signed(v, crate::numbers::decimals_for(&[v])),
    }
}

/// Days since 1970-01-01 to an ISO date label, coarser for long spans.
pub fn fmt_day(days: f64, span_days: f64) -> String {
    if !days.is_finite() {
        return String::new();
    }
    let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or_default();
    let Some(d) = epoch.checked_add_signed(chrono::Duration::days(days.round() as i64)) else {
        return String::new();
    };
    if span_days > 3.0 * 365.0 {
        d.format("%Y").to_string()
    } else if span_days > 400.0 {
        d.format("%b %Y").to_string()
    } else {
        d.format("%-d %b").to_string()
    }
}

/// Greedy word wrap at `max_chars` characters.
pub fn wrap(text: &str, max_chars: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > max_chars {
            lines.push(std::mem::take(&mut line));
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        lines.push(line);
    }
    lines
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_read_well() {
        assert_eq!(fmt_tick(25_000.0, 40_000.0, ValueFormat::Number), "25k");
        assert_eq!(fmt_tick(0.25, 1.0, ValueFormat::Number), "0.25");
        assert_eq!(fmt_tick(-0.0, 1.0, ValueFormat::Number), "0");
        assert_eq!(fmt_tick(0.0, 40_000.0, ValueFormat::Number), "0");
        assert_eq!(fmt_tick(-1e-12, 0.2, ValueFormat::Percent), "0%");
        assert_eq!(fmt_tick(-0.0, 1.0, ValueFormat::Share), "0.00");
        assert_eq!(fmt_tick(0.05, 0.2, ValueFormat::Percent), "5%");
        assert_eq!(fmt_tick(2_500_000.0, 3_000_000.0, ValueFormat::Number), "2.50M");
        assert_eq!(fmt_day(0.0, 30.0), "1 Jan");
        assert_eq!(fmt_day(365.0, 500.0), "Jan 1971");
        assert_eq!(wrap("a bb ccc dddd", 6), vec!["a bb", "ccc", "dddd"]);
    }
}
