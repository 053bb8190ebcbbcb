//! Printing a page to PDF through headless Chromium's print-to-PDF, when Chromium is
//! installed (`REGULUS_CHROMIUM`, or `chromium`, `chromium-browser` or `google-chrome` on the
//! PATH). Runs the browser with a fresh profile folder, no network services and no sandbox
//! (headless printing of a local file), then removes the profile.

use std::path::{Path, PathBuf};
use std::process::Command;

/// Why a PDF was not printed.
#[derive(Debug, thiserror::Error)]
pub enum PdfError {
    #[error("Chromium is not installed (no REGULUS_CHROMIUM, chromium, chromium-browser or google-chrome on the PATH): no PDF was printed; print the HTML page from a browser instead")]
    NoBrowser,
    #[error("{browser}: cannot start the browser to print {page}: {source}")]
    Start {
        browser: PathBuf,
        page: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{browser} did not print {page} to PDF (exit {code:?}): {stderr}")]
    Failed {
        browser: PathBuf,
        page: PathBuf,
        code: Option<i32>,
        stderr: String,
    },
}

/// The browser to print with, if one is installed.
pub fn find_chromium() -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("REGULUS_CHROMIUM") {
        let p = PathBuf::from(p);
        return p.is_file().then_some(p);
    }
    let path = std::env::var_os("PATH")?;
    for name in ["chromium", "chromium-browser", "google-chrome"] {
        for dir in std::env::split_paths(&path) {
            let p = dir.join(name);
            if p.is_file() {
                return Some(p);
            }
        }
    }
    None
}

/// The flags every headless run uses, with a fresh profile folder.
pub fn headless_flags(profile: &Path) -> Vec<String> {
    [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
    ]
    .iter()
    .map(|s| s.to_string())
    .chain([format!("--user-data-dir={}", profile.display())])
    .collect()
}

/// Print `page` (an HTML file) to `pdf` with the browser found by [`find_chromium`].
pub fn print_to_pdf(page: &Path, pdf: &Path) -> Result<(), PdfError> {
    let browser = find_chromium().ok_or(PdfError::NoBrowser)?;
    let profile = std::env::temp_dir().join(format!(
        "regulus-pdf-{}-{}",
        std::process::id(),
        std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_nanos())
            .unwrap_or(0)
    ));
    let page_abs = std::fs::canonicalize(page).unwrap_or_else(|_| page.to_path_buf());
    let out = Command::new(&browser)
        .args(headless_flags(&profile))
        .arg("--no-pdf-header-footer")
        .arg(format!("--print-to-pdf={}", pdf.display()))
        .arg(format!("file://{}", page_abs.display()))
        .output();
    let _ = std::fs::remove_dir_all(&profile);
    let out = out.map_err(|source| PdfError::Start {
        browser: browser.clone(),
        page: page.to_path_buf(),
        source,
    })?;
    let printed = std::fs::metadata(pdf).map(|m| m.len() > 0).unwrap_or(false);
    if !out.status.success() || !printed {
        return Err(PdfError::Failed {
            browser,
            page: page.to_path_buf(),
            code: out.status.code(),
            stderr: String::from_utf8_lossy(&out.stderr)
                .lines()
                .last()
                .unwrap_or("")
                .to_string(),
        });
    }
    Ok(())
}
