//! The map view's pictures of the grid: an overview of the whole grid, and for a large grid
//! seen close up, the part in view at one pixel per cell. Both come from render threads
//! ([`super::render`]); a UI frame only asks for what changed and uploads what arrived.

use super::GridView;
use super::grid_view::{SMALL_GRID, ViewData, ViewTransform};
use super::render::{MAX_SIDE, Rendered, Request, Window, render};
use crate::Grid;
use crate::grid::WorldBox;
use egui::{TextureHandle, TextureOptions};
use std::sync::Arc;

/// One picture of the grid on a texture, and what it is of.
pub(super) struct Picture {
    pub texture: TextureHandle,
    pub world: WorldBox,
    pub key: u64,
}

/// A number standing for everything a picture depends on.
fn picture_key(data: &ViewData<'_>, grid: &Arc<Grid>) -> u64 {
    use std::hash::{Hash, Hasher};
    let mut h = std::collections::hash_map::DefaultHasher::new();
    (
        data.grid_version,
        data.settings.palette,
        data.clamp.lo.to_bits(),
        data.clamp.hi.to_bits(),
        data.layer,
        Arc::as_ptr(grid) as usize,
        data.compare_with.map(|a| Arc::as_ptr(a) as usize),
    )
        .hash(&mut h);
    h.finish()
}

impl GridView {
    /// Uploads a finished picture.
    fn upload(ctx: &egui::Context, slot: &mut Option<Picture>, r: Rendered, name: &str) {
        match slot {
            Some(p) => {
                p.texture.set(r.image, TextureOptions::NEAREST);
                p.world = r.world;
                p.key = r.key;
            }
            None => {
                *slot = Some(Picture {
                    texture: ctx.load_texture(name, r.image, TextureOptions::NEAREST),
                    world: r.world,
                    key: r.key,
                })
            }
        }
    }

    /// Keeps the pictures of the grid up to date: asks for what changed, takes what arrived.
    pub(super) fn pictures(
        &mut self,
        ctx: &egui::Context,
        data: &ViewData<'_>,
        grid: &Arc<Grid>,
        t: &ViewTransform,
    ) {
        let key = picture_key(data, grid);
        let request = |window| Request {
            key,
            grid: grid.clone(),
            compare: data.compare_with.cloned(),
            palette: data.settings.palette,
            bounds: data.clamp,
            window,
        };
        if let Some(r) = self.overview_renderer.take() {
            if self.asked.0 == Some(r.key) {
                self.asked.0 = None;
            }
            Self::upload(ctx, &mut self.overview, r, "grid overview");
        }
        let current = self.overview.as_ref().map(|p| p.key);
        if current != Some(key) && self.asked.0 != Some(key) {
            if grid.spec().cells() <= SMALL_GRID {
                let r = render(&request(None));
                Self::upload(ctx, &mut self.overview, r, "grid overview");
            } else {
                self.overview_renderer.request(request(None));
                self.asked.0 = Some(key);
            }
        }
        // Close up on a large grid: the cells in view at one pixel each, once they fit.
        let spec = grid.spec();
        let large = spec.width.max(spec.height) > MAX_SIDE;
        let view_min = spec.cell_at(t.to_world(t.rect.left_bottom()));
        let view_max = spec.cell_at(t.to_world(t.rect.right_top()));
        let clip = |v: i64, n: u32| v.clamp(0, n as i64) as u32;
        let (c0, r0) = (
            clip(view_min.col - 8, spec.width),
            clip(view_min.row - 8, spec.height),
        );
        let (c1, r1) = (
            clip(view_max.col + 9, spec.width),
            clip(view_max.row + 9, spec.height),
        );
        let window = Window {
            col: c0,
            row: r0,
            cols: c1.saturating_sub(c0),
            rows: r1.saturating_sub(r0),
        };
        let wanted =
            large && window.cols > 0 && window.rows > 0 && window.cols.max(window.rows) <= MAX_SIDE;
        if let Some(r) = self.detail_renderer.take()
            && let Some((k, w)) = self.asked.1
            && k == r.key
        {
            self.asked.1 = None;
            let mut slot = self.detail.take().map(|(p, _)| p);
            Self::upload(ctx, &mut slot, r, "grid detail");
            self.detail = slot.map(|p| (p, w));
        }
        if !wanted {
            self.detail = None;
            return;
        }
        let covered = self.detail.as_ref().is_some_and(|(p, w)| {
            p.key == key
                && w.col <= window.col
                && w.row <= window.row
                && w.col + w.cols >= window.col + window.cols
                && w.row + w.rows >= window.row + window.rows
        });
        if !covered && self.asked.1.is_none() {
            // Ask for a little more than is in view, so small pans need no new picture.
            let grow = |a: u32, n: u32, total: u32| {
                let extra = n / 4;
                (
                    a.saturating_sub(extra),
                    (n + 2 * extra).min(total - a.saturating_sub(extra)),
                )
            };
            let (col, cols) = grow(window.col, window.cols, spec.width);
            let (row, rows) = grow(window.row, window.rows, spec.height);
            let w = Window {
                col,
                row,
                cols: cols.min(MAX_SIDE),
                rows: rows.min(MAX_SIDE),
            };
            self.detail_renderer.request(request(Some(w)));
            self.asked.1 = Some((key, w));
        }
    }
}
