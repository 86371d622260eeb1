//! Drawing a [`Chart`] on any plotters backend: the shared frame (title, caption, legend) and
//! one routine per body kind. Every routine filters non-finite values before drawing.

use super::theme::{
    self, CAPTION_SIZE, GRID, INK, MUTED, NOTE_SIZE, OCHRE, PAPER, POST_TINT, TEAL, TICK_SIZE, TITLE_SIZE, ValueFormat,
    fmt_tick, fmt_value, font, wrap,
};
use super::{Body, Chart, ChartError, LinePlot, MirrorPlot, PosteriorPlot, RowKind, RowPlot, Swatch, XKind};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

type Res = Result<(), String>;

fn e<E: std::fmt::Display>(x: E) -> String {
    x.to_string()
}

fn check_size(c: &Chart) -> Result<(), ChartError> {
    let ok = |v: u32| (200..=4000).contains(&v);
    if ok(c.width) && ok(c.height) {
        Ok(())
    } else {
        Err(ChartError::Size { chart: c.name.clone(), width: c.width, height: c.height })
    }
}

pub(super) fn svg(c: &Chart, header: bool) -> Result<String, ChartError> {
    check_size(c)?;
    if !theme::ensure_fonts() {
        return Err(ChartError::Font { chart: c.name.clone() });
    }
    let mut s = String::new();
    {
        let root = SVGBackend::with_string(&mut s, (c.width, c.height)).into_drawing_area();
        draw(&root, c, header).map_err(|message| ChartError::Draw { chart: c.name.clone(), message })?;
        root.present().map_err(|x| ChartError::Draw { chart: c.name.clone(), message: e(x) })?;
    }
    Ok(s)
}

pub(super) fn png(c: &Chart) -> Result<Vec<u8>, ChartError> {
    check_size(c)?;
    if !theme::ensure_fonts() {
        return Err(ChartError::Font { chart: c.name.clone() });
    }
    let (w, h) = (c.width, c.height);
    let mut buf = vec![0u8; w as usize * h as usize * 3];
    {
        let root = super::glyphs::Png::new(BitMapBackend::with_buffer(&mut buf, (w, h))).into_drawing_area();
        draw(&root, c, true).map_err(|message| ChartError::Draw { chart: c.name.clone(), message })?;
        root.present().map_err(|x| ChartError::Draw { chart: c.name.clone(), message: e(x) })?;
    }
    let enc_err = |x: png::EncodingError| ChartError::Encode { chart: c.name.clone(), message: x.to_string() };
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        let mut writer = enc.write_header().map_err(enc_err)?;
        writer.write_image_data(&buf).map_err(enc_err)?;
        writer.finish().map_err(enc_err)?;
    }
    Ok(out)
}

fn text_width<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, s: &str, style: &TextStyle) -> i32 {
    root.estimate_text_size(s, style)
        .map(|(w, _)| w as i32)
        .unwrap_or((s.chars().count() as f64 * style.font.get_size() * 0.55) as i32)
}

fn draw<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, c: &Chart, header: bool) -> Res {
    root.fill(&PAPER).map_err(e)?;
    let mut top = 14;
    if header {
        // identity mark: a short ochre bar beside the title
        root.draw(&Rectangle::new([(14, top + 2), (18, top + 24)], OCHRE.filled())).map_err(e)?;
        root.draw(&Text::new(c.title.clone(), (26, top), font(TITLE_SIZE, true, &INK))).map_err(e)?;
        top += 34;
        let max_chars = ((f64::from(c.width) - 52.0) / (CAPTION_SIZE * 0.56)).max(20.0) as usize;
        for line in wrap(&c.caption, max_chars) {
            root.draw(&Text::new(line, (26, top), font(CAPTION_SIZE, false, &MUTED))).map_err(e)?;
            top += 19;
        }
        top += 6;
    }
    if !c.legend.is_empty() {
        let style = font(NOTE_SIZE, false, &INK);
        let mut x = 26;
        for (label, color, swatch) in &c.legend {
            let w = text_width(root, label, &style);
            if x + 30 + w > c.width as i32 - 16 && x > 26 {
                x = 26;
                top += 22;
            }
            let cy = top + 8;
            match swatch {
                Swatch::Line => {
                    root.draw(&PathElement::new(vec![(x, cy), (x + 22, cy)], color.stroke_width(3))).map_err(e)?;
                }
                Swatch::Dashed => {
                    for k in 0..3 {
                        root.draw(&PathElement::new(vec![(x + k * 8, cy), (x + k * 8 + 5, cy)], color.stroke_width(3)))
                            .map_err(e)?;
                    }
                }
                Swatch::Band => {
                    root.draw(&Rectangle::new([(x, cy - 6), (x + 22, cy + 6)], color.mix(0.45).filled())).map_err(e)?;
                }
                Swatch::Dot => {
                    root.draw(&Circle::new((x + 11, cy), 5, color.filled())).map_err(e)?;
                }
                Swatch::Hollow => {
                    root.draw(&Circle::new((x + 11, cy), 5, color.stroke_width(2))).map_err(e)?;
                }
            }
            root.draw(&Text::new(label.clone(), (x + 30, cy - 8), style.clone())).map_err(e)?;
            x += 30 + w + 22;
        }
        top += 26;
    }
    let area = root.margin(top, 10, 10, 24);
    match &c.body {
        Body::Note(msg) => note(&area, msg),
        Body::Lines(p) => lines(root, &area, p),
        Body::Rows(p) => rows(root, &area, p),
        Body::Mirror(p) => mirror(&area, p),
        Body::Posterior(p) => posterior(&area, p),
    }
}

fn note<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, msg: &str) -> Res {
    let (w, h) = area.dim_in_pixel();
    area.draw(&Rectangle::new([(0, 0), (w as i32 - 1, h as i32 - 1)], GRID.stroke_width(1))).map_err(e)?;
    let max_chars = ((f64::from(w) - 40.0) / (15.0 * 0.56)).max(20.0) as usize;
    let lines = wrap(msg, max_chars);
    let mut y = h as i32 / 2 - 11 * lines.len() as i32;
    for l in lines {
        let style = font(15.0, false, &MUTED).pos(Pos::new(HPos::Center, VPos::Top));
        area.draw(&Text::new(l, (w as i32 / 2, y), style)).map_err(e)?;
        y += 22;
    }
    Ok(())
}

/// Finite (min, max) of a set of values.
fn extent<'a>(values: impl IntoIterator<Item = &'a f64>) -> Option<(f64, f64)> {
    let mut r: Option<(f64, f64)> = None;
    for v in values.into_iter().filter(|v| v.is_finite()) {
        r = Some(match r {
            None => (*v, *v),
            Some((a, b)) => (a.min(*v), b.max(*v)),
        });
    }
    r
}

fn widen((a, b): (f64, f64), frac: f64) -> (f64, f64) {
    if b - a <= f64::EPSILON * a.abs().max(b.abs()).max(1e-300) {
        let d = if a == 0.0 { 1.0 } else { a.abs() * 0.1 };
        return (a - d, b + d);
    }
    let d = (b - a) * frac;
    (a - d, b + d)
}

/// Runs of consecutive indices where `ok(i)` holds.
fn runs(n: usize, ok: impl Fn(usize) -> bool) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut start = None;
    for i in 0..=n {
        let good = i < n && ok(i);
        match (good, start) {
            (true, None) => start = Some(i),
            (false, Some(s)) => {
                out.push(s..i);
                start = None;
            }
            _ => {}
        }
    }
    out
}

fn mesh_labels(style: &TextStyle<'static>) -> TextStyle<'static> {
    style.clone()
}

fn lines<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, area: &DrawingArea<DB, Shift>, p: &LinePlot) -> Res {
    let xs = p.lines.iter().flat_map(|l| l.x.iter()).chain(p.bands.iter().flat_map(|b| b.x.iter()));
    let Some(xr) = extent(xs) else { return note(area, "Nothing finite to draw.") };
    let ys = p
        .lines
        .iter()
        .flat_map(|l| l.x.iter().zip(&l.y).filter(|(x, _)| x.is_finite()).map(|(_, y)| y))
        .chain(p.bands.iter().flat_map(|b| b.lo.iter().chain(&b.hi)))
        .chain(p.refs.iter().map(|r| &r.value));
    let ys: Vec<f64> = ys.copied().collect();
    // robust limits: a few far outliers are clipped and marked instead of squeezing the data
    let robust = super::robust_extent(&ys);
    let Some(yr) = p.y_range.or_else(|| {
        robust.map(|(lo, hi, _)| {
            let refs = p.refs.iter().map(|r| r.value).filter(|v| v.is_finite());
            let (lo, hi) = refs.fold((lo, hi), |(a, b), v| (a.min(v), b.max(v)));
            widen((lo, hi), 0.06)
        })
    }) else {
        return note(area, "Nothing finite to draw.");
    };
    let (x0, x1) = if xr.0 == xr.1 { widen(xr, 0.0) } else { xr };
    let (y0, y1) = if yr.0 == yr.1 { widen(yr, 0.0) } else { yr };
    let (xspan, yspan) = (x1 - x0, y1 - y0);
    let integer_x = p.xkind == XKind::Numbers
        && p.x_format == ValueFormat::Number
        && p.lines.iter().flat_map(|l| l.x.iter()).filter(|v| v.is_finite()).all(|v| v.fract() == 0.0);
    let mut cc = ChartBuilder::on(area)
        .x_label_area_size(if p.x_label.is_empty() { 30 } else { 50 })
        .y_label_area_size(if p.y_label.is_empty() { 64 } else { 84 })
        .margin_top(6)
        .build_cartesian_2d(x0..x1, y0..y1)
        .map_err(e)?;
    if let Some(ch) = p.change.filter(|c| c.is_finite() && *c < x1) {
        cc.draw_series(std::iter::once(Rectangle::new([(ch.max(x0), y0), (x1, y1)], POST_TINT.filled()))).map_err(e)?;
    }
    let xf = |v: &f64| match p.xkind {
        XKind::Dates => theme::fmt_day(*v, xspan),
        XKind::Numbers if integer_x => {
            if (v - v.round()).abs() < 1e-9 {
                format!("{}", v.round() as i64)
            } else {
                String::new()
            }
        }
        XKind::Numbers => fmt_tick(*v, xspan, p.x_format),
    };
    let yf = |v: &f64| fmt_tick(*v, yspan, p.y_format);
    let tick = font(TICK_SIZE, false, &MUTED);
    {
        let mut mesh = cc.configure_mesh();
        mesh.disable_x_mesh()
            .light_line_style(TRANSPARENT)
            .bold_line_style(GRID.stroke_width(1))
            .axis_style(MUTED.stroke_width(1))
            .label_style(mesh_labels(&tick))
            .axis_desc_style(mesh_labels(&tick))
            .x_labels(8)
            .y_labels(6)
            .x_label_formatter(&xf)
            .y_label_formatter(&yf);
        if !p.x_label.is_empty() {
            mesh.x_desc(p.x_label.clone());
        }
        if !p.y_label.is_empty() {
            mesh.y_desc(p.y_label.clone());
        }
        mesh.draw().map_err(e)?;
    }
    for b in &p.bands {
        let n = b.x.len().min(b.lo.len()).min(b.hi.len());
        for r in runs(n, |i| b.x[i].is_finite() && b.lo[i].is_finite() && b.hi[i].is_finite()) {
            let mut pts: Vec<(f64, f64)> = r.clone().map(|i| (b.x[i], b.lo[i].clamp(y0, y1))).collect();
            pts.extend(r.rev().map(|i| (b.x[i], b.hi[i].clamp(y0, y1))));
            cc.draw_series(std::iter::once(Polygon::new(pts, b.color.mix(b.alpha).filled()))).map_err(e)?;
        }
    }
    for rl in &p.refs {
        if !(rl.value.is_finite() && rl.value >= y0 && rl.value <= y1) {
            continue;
        }
        if rl.value == 0.0 && rl.label.is_empty() || rl.label == "no effect" {
            cc.draw_series(std::iter::once(PathElement::new(
                vec![(x0, rl.value), (x1, rl.value)],
                rl.color.mix(0.55).stroke_width(1),
            )))
            .map_err(e)?;
        } else {
            cc.draw_series(DashedLineSeries::new(vec![(x0, rl.value), (x1, rl.value)], 9, 6, rl.color.stroke_width(2)))
                .map_err(e)?;
        }
        // the zero line speaks through its tick; other references are named at the right end,
        // above the line, where the legend does not reach
        if !rl.label.is_empty() && rl.label != "no effect" {
            let style = font(NOTE_SIZE, false, &rl.color).pos(Pos::new(HPos::Right, VPos::Bottom));
            let el = EmptyElement::at((x1, rl.value)) + Text::new(rl.label.clone(), (-6, -4), style);
            cc.draw_series(std::iter::once(el)).map_err(e)?;
        }
    }
    let mut clipped = 0usize;
    for l in &p.lines {
        let n = l.x.len().min(l.y.len());
        let style = l.color.mix(l.alpha).stroke_width(l.width);
        // values beyond the axis: a triangle on the edge, pointing where the value lies
        for i in (0..n).filter(|&i| l.x[i].is_finite() && l.y[i].is_finite() && l.x[i] >= x0 && l.x[i] <= x1) {
            let up = l.y[i] > y1;
            if up || l.y[i] < y0 {
                clipped += 1;
                let tip = if up { vec![(0, 0), (-5, 9), (5, 9)] } else { vec![(0, 0), (-5, -9), (5, -9)] };
                let el =
                    EmptyElement::at((l.x[i], if up { y1 } else { y0 })) + Polygon::new(tip, l.color.mix(0.9).filled());
                cc.draw_series(std::iter::once(el)).map_err(e)?;
            }
        }
        for r in runs(n, |i| l.x[i].is_finite() && l.y[i].is_finite()) {
            let pts: Vec<(f64, f64)> = r.map(|i| (l.x[i], l.y[i].clamp(y0, y1))).collect();
            if pts.len() == 1 || l.points {
                cc.draw_series(pts.iter().map(|pt| Circle::new(*pt, 3 + l.width / 2, l.color.mix(l.alpha).filled())))
                    .map_err(e)?;
            }
            if pts.len() > 1 {
                if l.dashed {
                    cc.draw_series(DashedLineSeries::new(pts, 8, 5, style)).map_err(e)?;
                } else {
                    cc.draw_series(LineSeries::new(pts, style)).map_err(e)?;
                }
            }
        }
    }
    if clipped > 0 {
        let msg = format!(
            "{clipped} value{} beyond the axis, marked by triangles on its edge",
            if clipped == 1 { "" } else { "s" }
        );
        let el = EmptyElement::at((x0, y0)) + Text::new(msg, (8, -22), font(NOTE_SIZE, false, &MUTED));
        cc.draw_series(std::iter::once(el)).map_err(e)?;
    }
    if let Some(ch) = p.change.filter(|c| c.is_finite() && *c >= x0 && *c <= x1) {
        cc.draw_series(DashedLineSeries::new(vec![(ch, y0), (ch, y1)], 6, 4, INK.stroke_width(2))).map_err(e)?;
        let el = EmptyElement::at((ch, y1)) + Text::new(p.change_label, (6, 4), font(NOTE_SIZE, true, &INK));
        cc.draw_series(std::iter::once(el)).map_err(e)?;
    }
    let _ = root;
    Ok(())
}

fn rows<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, area: &DrawingArea<DB, Shift>, p: &RowPlot) -> Res {
    let n = p.rows.len();
    if n == 0 {
        return note(area, "No rows to draw.");
    }
    let mut vals: Vec<f64> = Vec::new();
    for r in &p.rows {
        vals.extend([r.value, r.lo, r.hi, r.before]);
    }
    if let Some((v, band, _)) = &p.reference {
        vals.push(*v);
        if let Some((a, b)) = band {
            vals.extend([*a, *b]);
        }
    }
    if let Some((t, _)) = &p.threshold {
        vals.push(*t);
    }
    if let Some(f) = p.x_floor {
        vals.push(f);
    }
    let Some(r) = extent(vals.iter()) else { return note(area, "Nothing finite to draw.") };
    let (mut x0, mut x1) = widen(r, 0.05);
    if let Some(f) = p.x_floor.filter(|f| r.0 >= *f) {
        x0 = f;
    }
    // room for the value notes on the right
    if p.rows.iter().any(|r| !r.note.is_empty()) {
        x1 += (x1 - x0) * 0.14;
    }
    let xspan = x1 - x0;
    let label_style = font(NOTE_SIZE, false, &INK);
    let label_w = p
        .rows
        .iter()
        .map(|r| text_width(root, &r.label, &label_style))
        .max()
        .unwrap_or(40)
        .clamp(40, (area.dim_in_pixel().0 as i32) * 2 / 5)
        + 18;
    // a label longer than its area is shortened with an ellipsis instead of running off the left
    let fit = |label: &str| -> String {
        let room = label_w - 18;
        if text_width(root, label, &label_style) <= room {
            return label.to_string();
        }
        let mut chars: Vec<char> = label.chars().collect();
        while chars.len() > 1 {
            chars.pop();
            let t: String = chars.iter().collect::<String>().trim_end().to_string() + "…";
            if text_width(root, &t, &label_style) <= room {
                return t;
            }
        }
        "…".into()
    };
    let (yb, yt) = (-0.7, n as f64 - 0.3);
    let mut cc = ChartBuilder::on(area)
        .x_label_area_size(if p.x_label.is_empty() { 30 } else { 50 })
        .y_label_area_size(label_w)
        .margin_top(6)
        .build_cartesian_2d(x0..x1, yb..yt)
        .map_err(e)?;
    let ypos = |i: usize| (n - 1 - i) as f64;
    cc.draw_series(
        (0..n)
            .filter(|i| i % 2 == 0)
            .map(|i| Rectangle::new([(x0, ypos(i) - 0.5), (x1, ypos(i) + 0.5)], RGBColor(243, 239, 230).filled())),
    )
    .map_err(e)?;
    let xf = |v: &f64| fmt_tick(*v, xspan, p.x_format);
    let empty = |_: &f64| String::new();
    let tick = font(TICK_SIZE, false, &MUTED);
    {
        let mut mesh = cc.configure_mesh();
        mesh.disable_y_mesh()
            .light_line_style(TRANSPARENT)
            .bold_line_style(GRID.stroke_width(1))
            .axis_style(MUTED.stroke_width(1))
            .label_style(tick.clone())
            .axis_desc_style(tick.clone())
            .x_labels(7)
            .y_labels(1)
            .x_label_formatter(&xf)
            .y_label_formatter(&empty);
        if !p.x_label.is_empty() {
            mesh.x_desc(p.x_label.clone());
        }
        mesh.draw().map_err(e)?;
    }
    if let Some((v, band, label)) = &p.reference {
        let color = if band.is_some() { OCHRE } else { INK };
        if let Some((a, b)) = band {
            cc.draw_series(std::iter::once(Rectangle::new(
                [(a.max(x0), yb), (b.min(x1), yt)],
                OCHRE.mix(0.22).filled(),
            )))
            .map_err(e)?;
        }
        if v.is_finite() {
            cc.draw_series(std::iter::once(PathElement::new(vec![(*v, yb), (*v, yt)], color.stroke_width(2))))
                .map_err(e)?;
            let el = EmptyElement::at((*v, yt)) + Text::new(label.clone(), (5, 2), font(NOTE_SIZE, true, &color));
            cc.draw_series(std::iter::once(el)).map_err(e)?;
        }
    }
    if let Some((t, label)) = &p.threshold {
        cc.draw_series(DashedLineSeries::new(vec![(*t, yb), (*t, yt)], 8, 5, theme::BRICK.stroke_width(2)))
            .map_err(e)?;
        let el = EmptyElement::at((*t, yt)) + Text::new(label.clone(), (5, 2), font(NOTE_SIZE, true, &theme::BRICK));
        cc.draw_series(std::iter::once(el)).map_err(e)?;
    }
    for (i, r) in p.rows.iter().enumerate() {
        let y = ypos(i);
        let cl = |v: f64| v.clamp(x0, x1);
        match p.kind {
            RowKind::Interval => {
                if r.lo.is_finite() && r.hi.is_finite() {
                    let st = r.color.stroke_width(3);
                    cc.draw_series(std::iter::once(PathElement::new(vec![(cl(r.lo), y), (cl(r.hi), y)], st)))
                        .map_err(e)?;
                    for end in [r.lo, r.hi] {
                        cc.draw_series(std::iter::once(PathElement::new(
                            vec![(cl(end), y - 0.18), (cl(end), y + 0.18)],
                            st,
                        )))
                        .map_err(e)?;
                    }
                }
                if r.value.is_finite() {
                    cc.draw_series(std::iter::once(Circle::new((cl(r.value), y), 7, r.color.filled()))).map_err(e)?;
                    cc.draw_series(std::iter::once(Circle::new((cl(r.value), y), 7, PAPER.stroke_width(2))))
                        .map_err(e)?;
                }
            }
            RowKind::Dumbbell => {
                if r.before.is_finite() && r.value.is_finite() {
                    cc.draw_series(std::iter::once(PathElement::new(
                        vec![(cl(r.before), y), (cl(r.value), y)],
                        MUTED.mix(0.7).stroke_width(2),
                    )))
                    .map_err(e)?;
                }
                if r.before.is_finite() {
                    cc.draw_series(std::iter::once(Circle::new((cl(r.before), y), 6, MUTED.stroke_width(2))))
                        .map_err(e)?;
                }
                if r.value.is_finite() {
                    cc.draw_series(std::iter::once(Circle::new((cl(r.value), y), 6, r.color.filled()))).map_err(e)?;
                }
            }
            RowKind::Bar => {
                if r.value.is_finite() {
                    let base = 0.0f64.clamp(x0, x1);
                    cc.draw_series(std::iter::once(Rectangle::new(
                        [(base, y - 0.32), (cl(r.value), y + 0.32)],
                        r.color.mix(0.9).filled(),
                    )))
                    .map_err(e)?;
                }
            }
        }
        if !r.note.is_empty() {
            let end = [r.value, r.hi].into_iter().filter(|v| v.is_finite()).fold(f64::NEG_INFINITY, f64::max);
            // a row without a value (a summed remainder) writes its note from the axis
            let end = if end.is_finite() { end } else { x0 };
            {
                let el = EmptyElement::at((cl(end), y))
                    + Text::new(r.note.clone(), (10, -7), font(NOTE_SIZE, false, &MUTED));
                cc.draw_series(std::iter::once(el)).map_err(e)?;
            }
        }
        let (px, py) = cc.backend_coord(&(x0, y));
        let style = label_style.clone().pos(Pos::new(HPos::Right, VPos::Center));
        root.draw(&Text::new(fit(&r.label), (px - 10, py), style)).map_err(e)?;
    }
    Ok(())
}

fn mirror<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, p: &MirrorPlot) -> Res {
    let (e0, e1) = (p.edges[0], p.edges[p.edges.len() - 1]);
    let (e0, e1) = if e1 > e0 { (e0, e1) } else { widen((e0, e0), 0.0) };
    let up = extent(p.panels.iter().flat_map(|q| q.up.iter())).map_or(0.0, |r| r.1);
    let down = extent(p.panels.iter().flat_map(|q| q.down.iter())).map_or(0.0, |r| r.1);
    let m = up.max(down).max(1e-9) * 1.12;
    let parts = area.split_evenly((1, p.panels.len().max(1)));
    let tick = font(TICK_SIZE, false, &MUTED);
    let yf = |v: &f64| if v.abs() < 1e-12 { "0".to_string() } else { fmt_tick(v.abs(), 2.0 * m, ValueFormat::Percent) };
    let xf = |v: &f64| fmt_tick(*v, e1 - e0, ValueFormat::Number);
    for (panel, part) in p.panels.iter().zip(parts.iter()) {
        let mut cc = ChartBuilder::on(part)
            .caption(panel.title.clone(), font(15.0, true, &INK))
            .x_label_area_size(48)
            .y_label_area_size(58)
            .margin_right(14)
            .build_cartesian_2d(e0..e1, -m..m)
            .map_err(e)?;
        cc.configure_mesh()
            .disable_x_mesh()
            .light_line_style(TRANSPARENT)
            .bold_line_style(GRID.stroke_width(1))
            .axis_style(MUTED.stroke_width(1))
            .label_style(tick.clone())
            .axis_desc_style(tick.clone())
            .x_labels(6)
            .y_labels(7)
            .x_label_formatter(&xf)
            .y_label_formatter(&yf)
            .x_desc(p.x_label.clone())
            .y_desc("share of the group")
            .draw()
            .map_err(e)?;
        for (i, w) in p.edges.windows(2).enumerate() {
            let inset = (w[1] - w[0]) * 0.06;
            let (a, b) = (w[0] + inset, w[1] - inset);
            if let Some(u) = panel.up.get(i).filter(|u| **u > 0.0) {
                cc.draw_series(std::iter::once(Rectangle::new(
                    [(a, 0.0), (b, u.min(m))],
                    p.up_color.mix(0.85).filled(),
                )))
                .map_err(e)?;
            }
            if let Some(d) = panel.down.get(i).filter(|d| **d > 0.0) {
                cc.draw_series(std::iter::once(Rectangle::new(
                    [(a, -d.min(m)), (b, 0.0)],
                    p.down_color.mix(0.85).filled(),
                )))
                .map_err(e)?;
            }
        }
        cc.draw_series(std::iter::once(PathElement::new(vec![(e0, 0.0), (e1, 0.0)], INK.stroke_width(1))))
            .map_err(e)?;
        let t = EmptyElement::at((e0, m)) + Text::new("treated ↑", (6, 4), font(NOTE_SIZE, true, &p.up_color));
        let c = EmptyElement::at((e0, -m)) + Text::new("control ↓", (6, -20), font(NOTE_SIZE, true, &p.down_color));
        cc.draw_series(std::iter::once(t)).map_err(e)?;
        cc.draw_series(std::iter::once(c)).map_err(e)?;
    }
    Ok(())
}

/// Extend `range` by [lo, hi] unless it lies more than one span away; returns whether it did.
fn include(range: &mut (f64, f64), lo: f64, hi: f64) -> bool {
    if !(lo.is_finite() && hi.is_finite()) {
        return false;
    }
    let span = (range.1 - range.0).max(1e-12);
    if hi < range.0 - span || lo > range.1 + span {
        return false;
    }
    range.0 = range.0.min(lo);
    range.1 = range.1.max(hi);
    true
}

fn posterior<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, p: &PosteriorPlot) -> Res {
    let s = &p.summary;
    let base: Vec<f64> = match &p.histogram {
        Some((edges, _)) => vec![edges[0], edges[edges.len() - 1], s.hdi_lower, s.hdi_upper],
        None => vec![s.lower, s.upper, s.hdi_lower, s.hdi_upper, s.estimate],
    };
    let Some(mut xr) = extent(base.iter()) else { return note(area, "The summary holds no finite interval.") };
    if xr.1 - xr.0 <= 0.0 {
        xr = widen(xr, 0.0);
    }
    let zero_shown = include(&mut xr, 0.0, 0.0);
    let rope_shown = p.rope.is_some_and(|(a, b)| include(&mut xr, a, b));
    let (x0, x1) = widen(xr, 0.04);
    let xspan = x1 - x0;
    let (m, y0, y1) = match &p.histogram {
        Some((_, shares)) => {
            let m = shares.iter().copied().fold(0.0, f64::max).max(1e-12);
            (m, -0.16 * m, 1.18 * m)
        }
        None => (1.0, 0.0, 1.0),
    };
    let mut cc = ChartBuilder::on(area)
        .x_label_area_size(50)
        .y_label_area_size(if p.histogram.is_some() { 84 } else { 20 })
        .margin_top(6)
        .build_cartesian_2d(x0..x1, y0..y1)
        .map_err(e)?;
    if let (Some((a, b)), true) = (p.rope, rope_shown) {
        cc.draw_series(std::iter::once(Rectangle::new([(a.max(x0), y0), (b.min(x1), y1)], OCHRE.mix(0.25).filled())))
            .map_err(e)?;
        let el = EmptyElement::at((a.max(x0), y1))
            + Text::new("ROPE", (4, 4), font(NOTE_SIZE, true, &RGBColor(140, 98, 18)));
        cc.draw_series(std::iter::once(el)).map_err(e)?;
    }
    let xf = |v: &f64| fmt_tick(*v, xspan, p.x_format);
    let yf = |v: &f64| if *v < -1e-12 { String::new() } else { fmt_tick(*v, m, ValueFormat::Percent) };
    let empty = |_: &f64| String::new();
    let tick = font(TICK_SIZE, false, &MUTED);
    {
        let mut mesh = cc.configure_mesh();
        mesh.disable_x_mesh()
            .light_line_style(TRANSPARENT)
            .bold_line_style(GRID.stroke_width(1))
            .axis_style(MUTED.stroke_width(1))
            .label_style(tick.clone())
            .axis_desc_style(tick.clone())
            .x_labels(7)
            .x_label_formatter(&xf)
            .x_desc(p.x_label.clone());
        if p.histogram.is_some() {
            mesh.y_labels(5).y_label_formatter(&yf).y_desc("share of draws");
        } else {
            mesh.disable_y_mesh().y_labels(1).y_label_formatter(&empty);
        }
        mesh.draw().map_err(e)?;
    }
    if zero_shown {
        cc.draw_series(DashedLineSeries::new(vec![(0.0, y0.max(0.0)), (0.0, y1)], 6, 4, INK.mix(0.7).stroke_width(1)))
            .map_err(e)?;
    }
    let hdi_ok = s.hdi_lower.is_finite() && s.hdi_upper.is_finite();
    match &p.histogram {
        Some((edges, shares)) => {
            for (i, w) in edges.windows(2).enumerate() {
                let v = shares.get(i).copied().unwrap_or(0.0);
                if v <= 0.0 {
                    continue;
                }
                let mid = 0.5 * (w[0] + w[1]);
                let inside = hdi_ok && mid >= s.hdi_lower && mid <= s.hdi_upper;
                let color = if inside { TEAL.mix(0.85) } else { MUTED.mix(0.4) };
                let inset = (w[1] - w[0]) * 0.05;
                cc.draw_series(std::iter::once(Rectangle::new(
                    [(w[0] + inset, 0.0), (w[1] - inset, v)],
                    color.filled(),
                )))
                .map_err(e)?;
            }
            if hdi_ok {
                let y = -0.08 * m;
                let st = TEAL.stroke_width(4);
                cc.draw_series(std::iter::once(PathElement::new(vec![(s.hdi_lower, y), (s.hdi_upper, y)], st)))
                    .map_err(e)?;
                for end in [s.hdi_lower, s.hdi_upper] {
                    cc.draw_series(std::iter::once(PathElement::new(
                        vec![(end, y - 0.04 * m), (end, y + 0.04 * m)],
                        st,
                    )))
                    .map_err(e)?;
                }
            }
            if s.estimate.is_finite() {
                cc.draw_series(std::iter::once(PathElement::new(
                    vec![(s.estimate, 0.0), (s.estimate, 1.06 * m)],
                    INK.stroke_width(2),
                )))
                .map_err(e)?;
            }
        }
        None => {
            let y = 0.5;
            if s.lower.is_finite() && s.upper.is_finite() {
                let st = MUTED.stroke_width(2);
                cc.draw_series(std::iter::once(PathElement::new(vec![(s.lower, y), (s.upper, y)], st))).map_err(e)?;
                for end in [s.lower, s.upper] {
                    cc.draw_series(std::iter::once(PathElement::new(vec![(end, y - 0.06), (end, y + 0.06)], st)))
                        .map_err(e)?;
                }
            }
            if hdi_ok {
                cc.draw_series(std::iter::once(Rectangle::new(
                    [(s.hdi_lower, y - 0.05), (s.hdi_upper, y + 0.05)],
                    TEAL.mix(0.85).filled(),
                )))
                .map_err(e)?;
            }
            if s.estimate.is_finite() {
                cc.draw_series(std::iter::once(Circle::new((s.estimate, y), 8, INK.filled()))).map_err(e)?;
            }
        }
    }
    if let Some(t) = p.threshold.filter(|t| *t >= x0 && *t <= x1) {
        cc.draw_series(DashedLineSeries::new(vec![(t, y0.max(0.0)), (t, y1)], 3, 3, theme::BRICK.stroke_width(2)))
            .map_err(e)?;
    }
    if let (Some((a, b)), false) = (p.rope, rope_shown) {
        let side = if b < x0 { "left" } else { "right" };
        let msg = format!(
            "ROPE [{}, {}] lies far to the {side}, off the chart",
            fmt_value(a, p.x_format),
            fmt_value(b, p.x_format)
        );
        let el = EmptyElement::at((x0, y1)) + Text::new(msg, (8, 6), font(NOTE_SIZE, false, &RGBColor(140, 98, 18)));
        cc.draw_series(std::iter::once(el)).map_err(e)?;
    }
    Ok(())
}
