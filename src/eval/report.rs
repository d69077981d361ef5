//! The eval report an editor reads: one self-contained HTML file (inline
//! CSS and SVG charts, no scripts, no external assets, works offline), a
//! Markdown summary, and the same numbers as JSON.
//!
//! invariant: every piece of text from a question set, a record or a
//! configuration is escaped before it reaches the HTML.

use super::run::{EvalReport, HEADLINE, lower_is_better};
use std::fmt::Write;

/// Escape text for HTML element content and attribute values.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// Colours for configurations: dark enough for text on white (WCAG AA).
const PALETTE: [&str; 6] = [
    "#0f4c47", "#8c2f1c", "#6a3d9a", "#5b5300", "#1d4f7a", "#7a3556",
];

fn colour(i: usize) -> &'static str {
    PALETTE[i % PALETTE.len()]
}

fn pct(v: f64) -> String {
    format!("{:.1}%", v * 100.0)
}

fn fmt_metric(v: Option<f64>) -> String {
    v.map(pct).unwrap_or_else(|| "–".into())
}

/// Horizontal bars: one group per label, one bar per series.
fn bar_chart(
    title: &str,
    labels: &[String],
    series: &[(String, Vec<Option<f64>>)],
    max: f64,
    unit: &dyn Fn(f64) -> String,
) -> String {
    let row = 16.0;
    let gap = 10.0;
    let left = 260.0;
    let width = 760.0;
    let plot = width - left - 70.0;
    let group = row * series.len() as f64 + gap;
    let height = 30.0 + group * labels.len() as f64 + 24.0 * series.len().div_ceil(3) as f64;
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg role="img" aria-labelledby="t-{id}" viewBox="0 0 {width} {height:.0}" width="{width}" height="{height:.0}" xmlns="http://www.w3.org/2000/svg"><title id="t-{id}">{t}</title>"##,
        id = esc(&title.replace(' ', "-")),
        t = esc(title)
    );
    for (li, label) in labels.iter().enumerate() {
        let y0 = 24.0 + group * li as f64;
        let _ = write!(
            s,
            r##"<text x="{x}" y="{y:.1}" text-anchor="end" font-size="12" fill="#222">{l}</text>"##,
            x = left - 8.0,
            y = y0 + row * series.len() as f64 / 2.0 + 4.0,
            l = esc(label)
        );
        for (si, (_, vals)) in series.iter().enumerate() {
            let y = y0 + row * si as f64;
            match vals.get(li).copied().flatten() {
                Some(v) => {
                    let w = if max > 0.0 {
                        (v / max).clamp(0.0, 1.0) * plot
                    } else {
                        0.0
                    };
                    let _ = write!(
                        s,
                        r##"<rect x="{left}" y="{y:.1}" width="{w:.1}" height="{h:.1}" fill="{c}"/><text x="{tx:.1}" y="{ty:.1}" font-size="11" fill="#222">{v}</text>"##,
                        h = row - 3.0,
                        c = colour(si),
                        tx = left + w + 4.0,
                        ty = y + row - 5.0,
                        v = esc(&unit(v))
                    );
                }
                None => {
                    let _ = write!(
                        s,
                        r##"<text x="{tx}" y="{ty:.1}" font-size="11" fill="#555">not applicable</text>"##,
                        tx = left + 4.0,
                        ty = y + row - 5.0
                    );
                }
            }
        }
    }
    // Legend.
    let ly = 24.0 + group * labels.len() as f64;
    for (si, (name, _)) in series.iter().enumerate() {
        let x = left + (si % 3) as f64 * 160.0;
        let y = ly + 24.0 * (si / 3) as f64;
        let _ = write!(
            s,
            r##"<rect x="{x}" y="{y:.1}" width="12" height="12" fill="{c}"/><text x="{tx}" y="{ty:.1}" font-size="12" fill="#222">{n}</text>"##,
            c = colour(si),
            tx = x + 16.0,
            ty = y + 10.0,
            n = esc(name)
        );
    }
    s.push_str("</svg>");
    s
}

/// Each configuration's per-question end-to-end latencies as dots, with
/// p50 and p95 marked.
fn latency_chart(r: &EvalReport) -> String {
    let width = 760.0;
    let left = 200.0;
    let plot = width - left - 30.0;
    let row = 34.0;
    let height = 40.0 + row * r.configs.len() as f64;
    let max = r
        .configs
        .iter()
        .flat_map(|c| c.questions.iter().map(|q| q.timings.total_ms))
        .fold(0.0f64, f64::max)
        .max(1.0);
    let x = |ms: f64| left + ms / max * plot;
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg role="img" aria-labelledby="t-latency" viewBox="0 0 {width} {height:.0}" width="{width}" height="{height:.0}" xmlns="http://www.w3.org/2000/svg"><title id="t-latency">End-to-end time per question, milliseconds</title>"##
    );
    for (ci, c) in r.configs.iter().enumerate() {
        let y = 20.0 + row * ci as f64 + row / 2.0;
        let _ = write!(
            s,
            r##"<text x="{tx}" y="{ty:.1}" text-anchor="end" font-size="12" fill="#222">{n}</text><line x1="{left}" x2="{x2}" y1="{y:.1}" y2="{y:.1}" stroke="#bbb"/>"##,
            tx = left - 8.0,
            ty = y + 4.0,
            n = esc(&c.name),
            x2 = left + plot
        );
        for q in &c.questions {
            let _ = write!(
                s,
                r##"<circle cx="{cx:.1}" cy="{y:.1}" r="3" fill="{col}" fill-opacity="0.55"/>"##,
                cx = x(q.timings.total_ms),
                col = colour(ci)
            );
        }
        for (label, v) in [("p50", c.latency.total.p50), ("p95", c.latency.total.p95)] {
            let _ = write!(
                s,
                r##"<line x1="{lx:.1}" x2="{lx:.1}" y1="{a:.1}" y2="{b:.1}" stroke="#111" stroke-width="2"/><text x="{lx:.1}" y="{ty:.1}" font-size="10" text-anchor="middle" fill="#222">{label} {v:.0}</text>"##,
                lx = x(v),
                a = y - 9.0,
                b = y + 9.0,
                ty = y - 11.0
            );
        }
    }
    let _ = write!(
        s,
        r##"<text x="{left}" y="{ty:.0}" font-size="11" fill="#333">0 ms</text><text x="{rx:.0}" y="{ty:.0}" font-size="11" text-anchor="end" fill="#333">{max:.0} ms</text></svg>"##,
        ty = height - 6.0,
        rx = left + plot
    );
    s
}

/// The page's look: the same ink-on-paper palette, serif text and seal
/// caution as onrecord's web page.
const STYLE: &str = "body{font-family:Charter,'Bitstream Charter','Sitka Text',Cambria,'DejaVu Serif',serif;color:#1f1d1a;background:#fbf8f1;max-width:60rem;margin:1.5rem auto;padding:0 1rem;line-height:1.55}
h1{font-size:1.7rem;font-variant:small-caps;letter-spacing:0.05em;border-bottom:3px double #857b68}h2{font-size:1.25rem;margin-top:2rem;font-variant:small-caps;letter-spacing:0.03em;border-top:4px solid #1f1d1a;padding-top:0.3rem}
table{border-collapse:collapse;margin:0.5rem 0;font-size:0.95rem;background:#fbf8f1}th,td{border:1px solid #857b68;padding:0.25rem 0.5rem;text-align:left;vertical-align:top}
th{background:#f3eee2}td.num{text-align:right;font-variant-numeric:tabular-nums;font-family:'DejaVu Sans Mono','Liberation Mono',monospace;font-size:0.9em}
.caution{border:3px double #8c2f1c;color:#8c2f1c;padding:0.5rem 1rem}
.warn{color:#8c2f1c}.gold{color:#0f4c47;font-weight:700}.struck{color:#4f4a41}
details{border:1px dashed #857b68;margin:0.4rem 0;padding:0.3rem 0.6rem}summary{cursor:pointer}
svg{max-width:100%;height:auto}";

/// The report as one self-contained HTML page.
pub fn html(r: &EvalReport) -> String {
    let mut h = String::new();
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>onrecord evaluation: {}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n",
        esc(&r.question_set)
    );
    let _ = write!(
        h,
        "<h1>onrecord evaluation</h1>\n<p>Question set <code>{}</code> ({} questions) on {}; made {} by onrecord {}.</p>\n",
        esc(&r.question_set),
        r.questions.len(),
        esc(&r.corpus),
        esc(&r.created_at),
        esc(&r.onrecord_version)
    );
    let _ = writeln!(
        h,
        "<p class=\"caution\"><strong>Caution:</strong> {}</p>",
        esc(&r.caution)
    );
    for w in &r.warnings {
        let _ = writeln!(h, "<p class=\"warn\">Warning: {}</p>", esc(w));
    }
    for s in &r.skipped {
        let _ = writeln!(
            h,
            "<p class=\"warn\">Not run: {} ({}): {}</p>",
            esc(&s.name),
            esc(&s.file),
            esc(&s.reason)
        );
    }

    h.push_str("<h2 id=\"headline\">Headline figures</h2>\n<table>\n<thead><tr><th scope=\"col\">metric</th>");
    for c in &r.configs {
        let _ = write!(h, "<th scope=\"col\">{}</th>", esc(&c.name));
    }
    h.push_str("</tr></thead>\n<tbody>\n");
    for (key, label) in HEADLINE {
        let _ = write!(h, "<tr><th scope=\"row\">{}</th>", esc(label));
        for c in &r.configs {
            let _ = write!(
                h,
                "<td class=\"num\">{}</td>",
                fmt_metric(c.headline.get(*key).copied())
            );
        }
        h.push_str("</tr>\n");
    }
    type Stage = fn(&super::run::Latency) -> super::run::Spread;
    let stages: [(&str, Stage); 4] = [
        ("retrieve", |l| l.retrieve),
        ("draft", |l| l.draft),
        ("verify", |l| l.verify),
        ("end to end", |l| l.total),
    ];
    for (label, stage) in stages {
        let _ = write!(
            h,
            "<tr><th scope=\"row\">{} p50 / p95 (ms)</th>",
            esc(label)
        );
        for c in &r.configs {
            let s = stage(&c.latency);
            let _ = write!(h, "<td class=\"num\">{:.1} / {:.1}</td>", s.p50, s.p95);
        }
        h.push_str("</tr>\n");
    }
    h.push_str("<tr><th scope=\"row\">tokens generated</th>");
    for c in &r.configs {
        let _ = write!(h, "<td class=\"num\">{}</td>", c.latency.generated_tokens);
    }
    h.push_str("</tr>\n");
    h.push_str("</tbody>\n</table>\n");
    h.push_str("<p>Retrieval figures count a page (or document) as found when any retrieved passage lies on it; k is each configuration's own. Answer figures follow the SQuAD v1.1 evaluation (lower case, no punctuation or articles). Citation precision and recall compare cited pages with the gold pages; the ALCE figures ask a second judge whether each sentence's citations support it (recall) and whether each citation is needed (precision).</p>\n");

    let groups = group_rows(r);
    if !groups.is_empty() {
        h.push_str("<h2 id=\"groups\">By question group</h2>\n<p>Questions are grouped by the letters their ids start with.</p>\n<table>\n<thead><tr><th scope=\"col\">group</th><th scope=\"col\">metric</th>");
        for c in &r.configs {
            let _ = write!(h, "<th scope=\"col\">{}</th>", esc(&c.name));
        }
        h.push_str("</tr></thead>\n<tbody>\n");
        for (g, n, key, label) in &groups {
            let _ = write!(
                h,
                "<tr><th scope=\"row\">{} ({n})</th><td>{}</td>",
                esc(g),
                esc(label)
            );
            for c in &r.configs {
                let v = c.groups.get(g).and_then(|x| x.headline.get(*key)).copied();
                let _ = write!(h, "<td class=\"num\">{}</td>", fmt_metric(v));
            }
            h.push_str("</tr>\n");
        }
        h.push_str("</tbody>\n</table>\n");
    }

    h.push_str("<h2 id=\"charts\">Charts</h2>\n");
    let labels: Vec<String> = HEADLINE.iter().map(|(k, _)| k.to_string()).collect();
    let series: Vec<(String, Vec<Option<f64>>)> = r
        .configs
        .iter()
        .map(|c| {
            (
                c.name.clone(),
                HEADLINE
                    .iter()
                    .map(|(k, _)| c.headline.get(*k).copied())
                    .collect(),
            )
        })
        .collect();
    h.push_str("<figure>\n");
    h.push_str(&bar_chart(
        "Headline metrics per configuration",
        &labels,
        &series,
        1.0,
        &pct,
    ));
    h.push_str("\n<figcaption>Headline metrics, 0 to 100%, one bar per configuration.</figcaption>\n</figure>\n<figure>\n");
    h.push_str(&latency_chart(r));
    h.push_str("\n<figcaption>End-to-end time per question (dots), with the median (p50) and 95th percentile (p95).</figcaption>\n</figure>\n");
    let mut reasons: Vec<String> = r
        .configs
        .iter()
        .flat_map(|c| c.strike_reasons.keys().cloned())
        .collect();
    reasons.sort();
    reasons.dedup();
    if reasons.is_empty() {
        h.push_str("<p>No sentence was struck.</p>\n");
    } else {
        let series: Vec<(String, Vec<Option<f64>>)> = r
            .configs
            .iter()
            .map(|c| {
                (
                    c.name.clone(),
                    reasons
                        .iter()
                        .map(|k| Some(c.strike_reasons.get(k).copied().unwrap_or(0) as f64))
                        .collect(),
                )
            })
            .collect();
        let max = series
            .iter()
            .flat_map(|(_, v)| v.iter().flatten().copied())
            .fold(0.0, f64::max);
        h.push_str("<figure>\n");
        h.push_str(&bar_chart("Strike reasons", &reasons, &series, max, &|v| {
            format!("{v:.0}")
        }));
        h.push_str("\n<figcaption>Why the verifier struck sentences: count per kind of reason.</figcaption>\n</figure>\n");
    }

    h.push_str("<h2 id=\"comparisons\">Is one configuration better?</h2>\n");
    if r.comparisons.is_empty() {
        h.push_str("<p>Only one configuration ran.</p>\n");
    }
    for cmp in &r.comparisons {
        let _ = write!(
            h,
            "<h3>{} minus {}</h3>\n<table>\n<thead><tr><th scope=\"col\">metric</th><th scope=\"col\">{}</th><th scope=\"col\">{}</th><th scope=\"col\">difference</th><th scope=\"col\">95% interval</th><th scope=\"col\">verdict</th></tr></thead>\n<tbody>\n",
            esc(&cmp.b),
            esc(&cmp.a),
            esc(&cmp.a),
            esc(&cmp.b)
        );
        for m in &cmp.metrics {
            let verdict = if !m.beyond_noise {
                "within noise".to_string()
            } else if (m.interval.diff > 0.0) != lower_is_better(&m.metric) {
                format!("{} better", cmp.b)
            } else {
                format!("{} worse", cmp.b)
            };
            let _ = writeln!(
                h,
                "<tr><th scope=\"row\">{}</th><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{:+.1} pts</td><td class=\"num\">[{:+.1}, {:+.1}]</td><td>{}</td></tr>",
                esc(label_of(&m.metric)),
                pct(m.a),
                pct(m.b),
                m.interval.diff * 100.0,
                m.interval.low * 100.0,
                m.interval.high * 100.0,
                esc(&verdict)
            );
        }
        h.push_str("</tbody>\n</table>\n");
    }
    let _ = writeln!(
        h,
        "<p>Paired bootstrap over questions: {} resamples, seed {}; an interval that contains 0 means the question set cannot tell the two apart.</p>",
        r.resamples, r.seed
    );

    h.push_str("<h2 id=\"questions\">Question by question</h2>\n");
    for (qi, q) in r.questions.iter().enumerate() {
        let _ = write!(
            h,
            "<details id=\"q-{}\">\n<summary><strong>{}</strong> — {}</summary>\n",
            qi,
            esc(&q.id),
            esc(&q.question)
        );
        let gold_pages: Vec<String> = q
            .evidence
            .iter()
            .map(|e| format!("{} p. {}", e.doc, e.page))
            .collect();
        let _ = writeln!(
            h,
            "<p>{}. Gold answer: {}. Gold pages: {}.</p>",
            if q.answerable {
                "Answerable"
            } else {
                "Not answerable from the records"
            },
            if q.answers.is_empty() {
                "none given".to_string()
            } else {
                esc(&q.answers.join(" | "))
            },
            if gold_pages.is_empty() {
                "none given".to_string()
            } else {
                esc(&gold_pages.join(", "))
            }
        );
        for c in &r.configs {
            let Some(run) = c.questions.get(qi) else {
                continue;
            };
            let _ = writeln!(h, "<h3>{}</h3>", esc(&c.name));
            if run.abstained {
                h.push_str("<p><em>No answer (abstained).</em></p>\n");
            }
            let supported: Vec<_> = run
                .sentences
                .iter()
                .filter(|s| s.verdict == crate::verify::Verdict::Supported)
                .collect();
            if !supported.is_empty() {
                h.push_str("<ul>\n");
                for s in supported {
                    let pages: Vec<String> = s
                        .pages
                        .iter()
                        .map(|p| {
                            let gold = q.evidence.contains(p);
                            format!(
                                "<span class=\"{}\">{} p. {}{}</span>",
                                if gold { "gold" } else { "page" },
                                esc(&p.doc),
                                p.page,
                                if gold { " (gold)" } else { "" }
                            )
                        })
                        .collect();
                    let _ = writeln!(h, "<li>{} — cites {}</li>", esc(&s.text), pages.join(", "));
                }
                h.push_str("</ul>\n");
            }
            let struck: Vec<_> = run
                .sentences
                .iter()
                .filter(|s| s.verdict == crate::verify::Verdict::Struck)
                .collect();
            if !struck.is_empty() {
                h.push_str("<p>Struck:</p>\n<ul class=\"struck\">\n");
                for s in struck {
                    let _ = writeln!(
                        h,
                        "<li><del>{}</del> — {}</li>",
                        esc(&s.text),
                        esc(s.reason.as_deref().unwrap_or("not supported"))
                    );
                }
                h.push_str("</ul>\n");
            }
        }
        h.push_str("</details>\n");
    }
    h.push_str("</body>\n</html>\n");
    h
}

/// Metrics shown per question group.
const GROUP_METRICS: &[&str] = &[
    "answer_contained",
    "answered_rate",
    "abstain_recall",
    "page_recall@k",
    "citation_precision",
];

/// (group, questions, metric key, label) for every group metric that any
/// configuration has, groups in order.
fn group_rows(r: &EvalReport) -> Vec<(String, usize, &'static str, &'static str)> {
    let mut out = Vec::new();
    let Some(first) = r.configs.iter().find(|c| !c.groups.is_empty()) else {
        return out;
    };
    for (g, grp) in &first.groups {
        for key in GROUP_METRICS {
            if r.configs.iter().any(|c| {
                c.groups
                    .get(g)
                    .is_some_and(|x| x.headline.contains_key(*key))
            }) {
                out.push((g.clone(), grp.questions, *key, label_of(key)));
            }
        }
    }
    out
}

/// A metric's reader-facing label.
fn label_of(key: &str) -> &'static str {
    HEADLINE
        .iter()
        .find(|(k, _)| *k == key)
        .map_or("", |(_, l)| l)
}

/// A Markdown summary: the headline table and the comparisons.
pub fn markdown(r: &EvalReport) -> String {
    let mut m = String::new();
    let _ = writeln!(
        m,
        "# onrecord evaluation\n\nQuestion set `{}` ({} questions) on {}; made {}.\n",
        r.question_set,
        r.questions.len(),
        r.corpus,
        r.created_at
    );
    let _ = write!(m, "| metric |");
    for c in &r.configs {
        let _ = write!(m, " {} |", c.name);
    }
    let _ = write!(m, "\n|---|");
    for _ in &r.configs {
        m.push_str("---:|");
    }
    m.push('\n');
    for (key, label) in HEADLINE {
        let _ = write!(m, "| {label} |");
        for c in &r.configs {
            let _ = write!(m, " {} |", fmt_metric(c.headline.get(*key).copied()));
        }
        m.push('\n');
    }
    let _ = write!(m, "| end-to-end p50 / p95 (ms) |");
    for c in &r.configs {
        let _ = write!(
            m,
            " {:.1} / {:.1} |",
            c.latency.total.p50, c.latency.total.p95
        );
    }
    m.push('\n');
    let groups = group_rows(r);
    if !groups.is_empty() {
        let _ = writeln!(m, "\n## By question group\n");
        let _ = write!(m, "| group | metric |");
        for c in &r.configs {
            let _ = write!(m, " {} |", c.name);
        }
        let _ = write!(m, "\n|---|---|");
        for _ in &r.configs {
            m.push_str("---:|");
        }
        m.push('\n');
        for (g, n, key, label) in &groups {
            let _ = write!(m, "| {g} ({n}) | {label} |");
            for c in &r.configs {
                let v = c.groups.get(g).and_then(|x| x.headline.get(*key)).copied();
                let _ = write!(m, " {} |", fmt_metric(v));
            }
            m.push('\n');
        }
    }
    for cmp in &r.comparisons {
        let _ = writeln!(
            m,
            "\n## {} minus {}\n\n| metric | difference | 95% interval | beyond noise |\n|---|---:|---:|---|",
            cmp.b, cmp.a
        );
        for d in &cmp.metrics {
            let _ = writeln!(
                m,
                "| {} | {:+.1} pts | [{:+.1}, {:+.1}] | {} |",
                label_of(&d.metric),
                d.interval.diff * 100.0,
                d.interval.low * 100.0,
                d.interval.high * 100.0,
                if d.beyond_noise { "yes" } else { "no" }
            );
        }
    }
    for w in &r.warnings {
        let _ = writeln!(m, "\nWarning: {w}");
    }
    for s in &r.skipped {
        let _ = writeln!(m, "\nNot run: {} ({}): {}", s.name, s.file, s.reason);
    }
    let _ = writeln!(m, "\n> **Caution:** {}", r.caution);
    m
}

/// Write `report.html`, `report.json` and `summary.md` into `dir`.
pub fn write_all(r: &EvalReport, dir: &std::path::Path) -> crate::Result<()> {
    use crate::Error;
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let json = serde_json::to_string_pretty(r).map_err(|e| Error::Invalid(e.to_string()))?;
    for (name, body) in [
        ("report.html", html(r)),
        ("report.json", json),
        ("summary.md", markdown(r)),
    ] {
        let p = dir.join(name);
        std::fs::write(&p, body).map_err(|e| Error::io(&p, e))?;
    }
    Ok(())
}
