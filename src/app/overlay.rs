//! What the map view draws over the map: text boxes, the scale bar, the colour legend, a
//! sector's outline, and saving the view as PNG.

use super::ViewTransform;
use super::palette::{Palette, cell_colour};
use crate::geometry::Point2;
use egui::{Color32, Pos2, Rect, Stroke, pos2, vec2};

/// A "nice" length (1, 2 or 5 times a power of ten) close to `target` metres.
pub fn nice_length(target: f64) -> f64 {
    let p = 10f64.powf(target.log10().floor());
    let m = target / p;
    let k = if m < 1.5 {
        1.0
    } else if m < 3.5 {
        2.0
    } else if m < 7.5 {
        5.0
    } else {
        10.0
    };
    k * p
}

/// Outline of a sector as screen points.
pub fn sector_outline(
    t: &ViewTransform,
    origin: Point2,
    heading: f64,
    width: f64,
    r: f64,
) -> Vec<Pos2> {
    let mut pts = vec![t.to_screen(origin)];
    let n = 16;
    for k in 0..=n {
        let a = heading - width / 2.0 + width * k as f64 / n as f64;
        pts.push(t.to_screen(Point2::new(origin.x + r * a.cos(), origin.y + r * a.sin())));
    }
    pts
}

/// Text in a dark box, anchored at `at`.
pub fn overlay_text(painter: &egui::Painter, at: Pos2, align: egui::Align2, text: &str) {
    let galley = painter.layout_no_wrap(
        text.to_string(),
        egui::FontId::monospace(13.0),
        Color32::WHITE,
    );
    let r = align.anchor_size(at, galley.size()).expand(4.0);
    painter.rect_filled(r, 3.0, Color32::from_black_alpha(170));
    painter.galley(r.min + vec2(4.0, 4.0), galley, Color32::WHITE);
}

/// The scale bar in the bottom-left corner, for `scale` points per metre.
pub fn scale_bar(painter: &egui::Painter, rect: Rect, scale: f32) {
    let metres = nice_length((110.0 / scale) as f64);
    let px = metres as f32 * scale;
    let base = rect.left_bottom() + vec2(16.0, -18.0);
    let stroke = Stroke::new(2.0, Color32::WHITE);
    painter.rect_filled(
        Rect::from_min_size(base + vec2(-6.0, -22.0), vec2(px + 12.0, 30.0)),
        3.0,
        Color32::from_black_alpha(150),
    );
    painter.line_segment([base, base + vec2(px, 0.0)], stroke);
    painter.line_segment([base + vec2(0.0, -5.0), base + vec2(0.0, 3.0)], stroke);
    painter.line_segment([base + vec2(px, -5.0), base + vec2(px, 3.0)], stroke);
    let label = if metres >= 1.0 {
        format!("{metres} m")
    } else {
        format!("{} cm", metres * 100.0)
    };
    painter.text(
        base + vec2(px / 2.0, -6.0),
        egui::Align2::CENTER_BOTTOM,
        label,
        egui::FontId::proportional(12.0),
        Color32::WHITE,
    );
}

/// The colour legend in the bottom-right corner, for clamp bounds `lo < 0 < hi`.
pub fn legend(painter: &egui::Painter, rect: Rect, palette: Palette, lo: f32, hi: f32) {
    let size = vec2(220.0, 14.0);
    let origin = rect.right_bottom() + vec2(-size.x - 20.0, -40.0);
    painter.rect_filled(
        Rect::from_min_size(origin + vec2(-8.0, -22.0), size + vec2(16.0, 46.0)),
        3.0,
        Color32::from_black_alpha(150),
    );
    let n = 64;
    for k in 0..n {
        let u = k as f32 / (n - 1) as f32;
        let l = lo + (hi - lo) * u;
        let x0 = origin.x + size.x * k as f32 / n as f32;
        let r = Rect::from_min_size(pos2(x0, origin.y), vec2(size.x / n as f32 + 0.5, size.y));
        painter.rect_filled(r, 0.0, cell_colour(palette, l, lo, hi));
    }
    let zero_x = origin.x + size.x * (-lo / (hi - lo));
    painter.line_segment(
        [
            pos2(zero_x, origin.y - 3.0),
            pos2(zero_x, origin.y + size.y + 3.0),
        ],
        Stroke::new(1.0, Color32::WHITE),
    );
    let font = egui::FontId::proportional(11.0);
    let label = |at: Pos2, align, text: String| {
        painter.text(at, align, text, font.clone(), Color32::WHITE);
    };
    label(
        origin + vec2(0.0, -4.0),
        egui::Align2::LEFT_BOTTOM,
        "free".into(),
    );
    label(
        origin + vec2(size.x, -4.0),
        egui::Align2::RIGHT_BOTTOM,
        "occupied".into(),
    );
    let below = origin.y + size.y + 3.0;
    label(
        pos2(origin.x, below),
        egui::Align2::LEFT_TOP,
        format!("{lo:+.2}"),
    );
    label(
        pos2(origin.x + size.x, below),
        egui::Align2::RIGHT_TOP,
        format!("{hi:+.2} log-odds"),
    );
    // "Unknown" (log-odds 0) is labelled only where the labels at the ends leave room.
    if zero_x - origin.x > 50.0 && origin.x + size.x - zero_x > 80.0 {
        label(pos2(zero_x, below), egui::Align2::CENTER_TOP, "0".into());
        label(
            pos2(zero_x, origin.y - 4.0),
            egui::Align2::CENTER_BOTTOM,
            "unknown".into(),
        );
    }
}

/// Crops a screenshot to the view rectangle and writes it as PNG.
pub fn save_view(
    image: &egui::ColorImage,
    rect: Rect,
    ppp: f32,
    path: &std::path::Path,
) -> Result<(), String> {
    let [w, h] = image.size;
    let x0 = ((rect.min.x * ppp).round().max(0.0) as usize).min(w);
    let y0 = ((rect.min.y * ppp).round().max(0.0) as usize).min(h);
    let x1 = ((rect.max.x * ppp).round().max(0.0) as usize).min(w);
    let y1 = ((rect.max.y * ppp).round().max(0.0) as usize).min(h);
    if x1 <= x0 || y1 <= y0 {
        return Err("the view is empty".into());
    }
    let mut out = image::RgbaImage::new((x1 - x0) as u32, (y1 - y0) as u32);
    for y in y0..y1 {
        for x in x0..x1 {
            let c = image.pixels[y * w + x];
            out.put_pixel(
                (x - x0) as u32,
                (y - y0) as u32,
                image::Rgba([c.r(), c.g(), c.b(), 255]),
            );
        }
    }
    let mut bytes = std::io::Cursor::new(Vec::new());
    out.write_to(&mut bytes, image::ImageFormat::Png)
        .map_err(|e| e.to_string())?;
    crate::io::atomic::write_all_atomically(&[(path.to_path_buf(), bytes.into_inner())])
        .map_err(|e| e.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nice_lengths() {
        assert_eq!(nice_length(1.2), 1.0);
        assert_eq!(nice_length(2.9), 2.0);
        assert_eq!(nice_length(0.06), 0.05);
        assert_eq!(nice_length(80.0), 100.0);
    }
}
