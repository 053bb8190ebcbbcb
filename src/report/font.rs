//! The embedded font for plots: DejaVu Sans (licence in `assets/fonts/LICENSE-DejaVu.txt`),
//! registered with plotters under the family name `sans-serif` so PNG and SVG text renders on
//! machines without system fonts. Owns nothing else; must not touch the file system.

use std::sync::OnceLock;

/// DejaVu Sans, embedded at build time.
pub static DEJAVU_SANS: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// The family name plots use for all text.
pub const FAMILY: &str = "sans-serif";

/// Register the embedded font once; later calls return the first result.
pub fn ensure_registered() -> Result<(), String> {
    static DONE: OnceLock<Result<(), String>> = OnceLock::new();
    DONE.get_or_init(|| {
        plotters::style::register_font(FAMILY, plotters::style::FontStyle::Normal, DEJAVU_SANS)
            .map_err(|_| "the embedded DejaVu Sans font could not be loaded".to_string())
    })
    .clone()
}
