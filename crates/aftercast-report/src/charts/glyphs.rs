//! Text in PNG charts, laid out on a common baseline.
//!
//! plotters' own bitmap text places each glyph by its outline's box, so a decimal point or a
//! comma floats at mid-height ("+2·40") and side bearings are lost. [`Png`] wraps the bitmap
//! backend and draws text itself with ab_glyph (already plotters' font engine): every glyph sits
//! on the line's baseline at its pen position plus kerning, with the outline's pixel box placed
//! where the font puts it. Everything else is handed to the bitmap backend unchanged.

use ab_glyph::{Font, FontRef, PxScale, ScaleFont, point};
use plotters::prelude::*;
use plotters_backend::text_anchor::{HPos, VPos};
use plotters_backend::{
    BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingErrorKind, FontStyle, FontTransform,
};
use std::sync::OnceLock;

struct Faces {
    regular: FontRef<'static>,
    bold: FontRef<'static>,
}

fn faces() -> Option<&'static Faces> {
    static FACES: OnceLock<Option<Faces>> = OnceLock::new();
    FACES
        .get_or_init(|| {
            Some(Faces {
                regular: FontRef::try_from_slice(dejavu::sans::regular()).ok()?,
                bold: FontRef::try_from_slice(dejavu::sans::bold()).ok()?,
            })
        })
        .as_ref()
}

/// One glyph's coverage, in pixels relative to the top-left of the line's layout box.
pub(crate) struct Coverage {
    /// (x, y, coverage 0..1) per touched pixel.
    pub pixels: Vec<(i32, i32, f32)>,
    /// Layout box: advance width and line height (ascent - descent), in pixels.
    pub width: i32,
    pub height: i32,
}

/// Lay out `text` at pixel size `size` (the line height, as plotters sizes fonts) and return
/// the covered pixels; None when the embedded font cannot be read.
pub(crate) fn layout(text: &str, size: f64, bold: bool) -> Option<Coverage> {
    let faces = faces()?;
    let face = if bold { &faces.bold } else { &faces.regular };
    let font = face.as_scaled(PxScale::from(size as f32));
    let ascent = font.ascent();
    let baseline = ascent.round();
    let mut pen = 0f32;
    let mut prev = None;
    let mut pixels = Vec::new();
    for c in text.chars() {
        let id = font.glyph_id(c);
        if let Some(p) = prev {
            pen += font.kern(p, id);
        }
        prev = Some(id);
        let glyph = id.with_scale_and_position(font.scale(), point(pen.round(), baseline));
        if let Some(outlined) = font.outline_glyph(glyph) {
            let b = outlined.px_bounds();
            let (x0, y0) = (b.min.x as i32, b.min.y as i32);
            outlined.draw(|x, y, cov| {
                if cov > 0.0 {
                    pixels.push((x0 + x as i32, y0 + y as i32, cov.min(1.0)));
                }
            });
        }
        pen += font.h_advance(id);
    }
    Some(Coverage { pixels, width: pen.ceil() as i32, height: (font.ascent() - font.descent()).ceil() as i32 })
}

/// The bitmap backend with text of our own layout.
pub(crate) struct Png<'a> {
    inner: BitMapBackend<'a>,
}

impl<'a> Png<'a> {
    pub(crate) fn new(inner: BitMapBackend<'a>) -> Png<'a> {
        Png { inner }
    }
}

type Err<'a> = DrawingErrorKind<<BitMapBackend<'a> as DrawingBackend>::ErrorType>;

fn is_bold<S: BackendTextStyle>(style: &S) -> bool {
    matches!(style.style(), FontStyle::Bold)
}

impl<'a> DrawingBackend for Png<'a> {
    type ErrorType = <BitMapBackend<'a> as DrawingBackend>::ErrorType;

    fn get_size(&self) -> (u32, u32) {
        self.inner.get_size()
    }
    fn ensure_prepared(&mut self) -> Result<(), Err<'a>> {
        self.inner.ensure_prepared()
    }
    fn present(&mut self) -> Result<(), Err<'a>> {
        self.inner.present()
    }
    fn draw_pixel(&mut self, point: BackendCoord, color: BackendColor) -> Result<(), Err<'a>> {
        self.inner.draw_pixel(point, color)
    }
    fn draw_line<S: BackendStyle>(&mut self, from: BackendCoord, to: BackendCoord, style: &S) -> Result<(), Err<'a>> {
        self.inner.draw_line(from, to, style)
    }
    fn draw_rect<S: BackendStyle>(
        &mut self,
        upper_left: BackendCoord,
        bottom_right: BackendCoord,
        style: &S,
        fill: bool,
    ) -> Result<(), Err<'a>> {
        self.inner.draw_rect(upper_left, bottom_right, style, fill)
    }
    fn draw_path<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        path: I,
        style: &S,
    ) -> Result<(), Err<'a>> {
        self.inner.draw_path(path, style)
    }
    fn draw_circle<S: BackendStyle>(
        &mut self,
        center: BackendCoord,
        radius: u32,
        style: &S,
        fill: bool,
    ) -> Result<(), Err<'a>> {
        self.inner.draw_circle(center, radius, style, fill)
    }
    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<(), Err<'a>> {
        self.inner.fill_polygon(vert, style)
    }
    fn blit_bitmap(&mut self, pos: BackendCoord, size: (u32, u32), src: &[u8]) -> Result<(), Err<'a>> {
        self.inner.blit_bitmap(pos, size, src)
    }

    fn estimate_text_size<S: BackendTextStyle>(&self, text: &str, style: &S) -> Result<(u32, u32), Err<'a>> {
        match layout(text, style.size(), is_bold(style)) {
            Some(c) => Ok((c.width.max(0) as u32, c.height.max(0) as u32)),
            None => self.inner.estimate_text_size(text, style),
        }
    }

    fn draw_text<S: BackendTextStyle>(&mut self, text: &str, style: &S, pos: BackendCoord) -> Result<(), Err<'a>> {
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        let Some(c) = layout(text, style.size(), is_bold(style)) else {
            return self.inner.draw_text(text, style, pos);
        };
        let dx = match style.anchor().h_pos {
            HPos::Left => 0,
            HPos::Right => -c.width,
            HPos::Center => -c.width / 2,
        };
        let dy = match style.anchor().v_pos {
            VPos::Top => 0,
            VPos::Center => -c.height / 2,
            VPos::Bottom => -c.height,
        };
        let trans: FontTransform = style.transform();
        let (w, h) = self.get_size();
        for (x, y, cov) in c.pixels {
            let (x, y) = trans.transform(x + dx, y + dy);
            let (x, y) = (pos.0 + x, pos.1 + y);
            if x >= 0 && y >= 0 && (x as u32) < w && (y as u32) < h {
                let a = color.alpha * f64::from(cov);
                self.inner.draw_pixel((x, y), BackendColor { alpha: a, rgb: color.rgb })?;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use plotters::style::text_anchor::Pos;

    /// Ink columns of a rendered line split into glyphs at empty columns: (first x, last x,
    /// top y, bottom y) per glyph, from a buffer of `w` x `h` RGB pixels on white.
    fn glyph_boxes(buf: &[u8], w: usize, h: usize) -> Vec<(usize, usize, usize, usize)> {
        let ink = |x: usize, y: usize| buf[(y * w + x) * 3] < 128;
        let mut boxes: Vec<(usize, usize, usize, usize)> = Vec::new();
        let mut open = false;
        for x in 0..w {
            let rows: Vec<usize> = (0..h).filter(|&y| ink(x, y)).collect();
            match (rows.is_empty(), open) {
                (false, false) => {
                    boxes.push((x, x, rows[0], rows[rows.len() - 1]));
                    open = true;
                }
                (false, true) => {
                    let b = boxes.last_mut().expect("open box");
                    b.1 = x;
                    b.2 = b.2.min(rows[0]);
                    b.3 = b.3.max(rows[rows.len() - 1]);
                }
                (true, _) => open = false,
            }
        }
        boxes
    }

    #[test]
    fn a_decimal_point_and_a_comma_sit_on_the_baseline_of_the_digits() {
        // Rendered through the PNG backend as every chart label is; the glyph boxes are read
        // back from the pixels. A point floating at mid-height (+2·40) fails here.
        assert!(crate::charts::theme::ensure_fonts());
        for (text, dot_at, size) in [("20.5", 2usize, 13.0), ("20.5", 2, 26.0), ("4,7", 1, 13.0), ("4,7", 1, 26.0)] {
            let (w, h) = (160usize, 60usize);
            let mut buf = vec![255u8; w * h * 3];
            {
                let root = Png::new(BitMapBackend::with_buffer(&mut buf, (w as u32, h as u32))).into_drawing_area();
                let style = crate::charts::theme::font(size, false, &BLACK).pos(Pos::new(HPos::Left, VPos::Top));
                root.draw(&Text::new(text.to_string(), (8, 8), style)).expect("draw");
                root.present().expect("present");
            }
            let boxes = glyph_boxes(&buf, w, h);
            assert_eq!(boxes.len(), text.chars().count(), "{text} at {size} px: one ink run per glyph: {boxes:?}");
            let digit = boxes[0];
            let mark = boxes[dot_at];
            let digit_height = digit.3 - digit.2;
            // the mark's top is in the lower quarter of the digit; the point's bottom row is the
            // digits' bottom row, the comma hangs below it (plotters' own bitmap text puts the
            // point a pixel above the baseline at 13 px and the comma on it)
            assert!(mark.2 > digit.2 + 3 * digit_height / 4, "{text}: mark top {} vs digit {digit:?}", mark.2);
            if dot_at == 2 {
                assert_eq!(mark.3, digit.3, "{text} at {size} px: point bottom {} vs digit bottom {}", mark.3, digit.3);
            } else {
                assert!(
                    mark.3 > digit.3,
                    "{text} at {size} px: comma bottom {} above the baseline {}",
                    mark.3,
                    digit.3
                );
            }
            // every digit shares one baseline
            let last = boxes[boxes.len() - 1];
            assert_eq!(last.3, digit.3, "{text} at {size} px: digits on different baselines: {boxes:?}");
        }
    }

    #[test]
    fn the_layout_box_is_the_advance_and_the_line_height() {
        let c = layout("0000", 20.0, false).expect("font");
        let one = layout("0", 20.0, false).expect("font");
        assert_eq!(c.width, 4 * one.width);
        assert!(c.pixels.iter().all(|&(x, y, _)| x >= 0 && x <= c.width && y >= 0 && y <= c.height));
    }
}
