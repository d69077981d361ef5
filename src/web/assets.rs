//! The page's files, compiled into the binary: nothing is fetched from
//! elsewhere, so the page works offline and leaks no request.

use axum::http::header;
use axum::response::IntoResponse;

pub const PAGE: &str = include_str!("assets/index.html");
pub const SCRIPT: &str = include_str!("assets/app.js");
pub const STYLE: &str = include_str!("assets/app.css");
pub const ICON: &str = include_str!("assets/icon.svg");

/// The page, with the caution filled in.
pub fn page_html() -> String {
    let caution = crate::answer::CAUTION
        .replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;");
    PAGE.replace("{{CAUTION}}", &caution)
}

pub async fn page() -> impl IntoResponse {
    static HTML: std::sync::LazyLock<String> = std::sync::LazyLock::new(page_html);
    (
        [(header::CONTENT_TYPE, "text/html; charset=utf-8")],
        HTML.as_str(),
    )
}

pub async fn script() -> impl IntoResponse {
    (
        [(header::CONTENT_TYPE, "text/javascript; charset=utf-8")],
        SCRIPT,
    )
}

pub async fn style() -> impl IntoResponse {
    ([(header::CONTENT_TYPE, "text/css; charset=utf-8")], STYLE)
}

pub async fn icon() -> impl IntoResponse {
    ([(header::CONTENT_TYPE, "image/svg+xml")], ICON)
}
