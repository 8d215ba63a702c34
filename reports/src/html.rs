//! `index.html`: the whole report as one page that needs nothing else to show
//! its figures (SVG inline, pictures as `data:` URIs), with print styles. Only
//! the full-resolution sheet views and the CSV files are links to files beside it.

use crate::Report;
use crate::audit::Role;
use crate::base64::png_data_uri;
use crate::palette::{FALSE_ALARM, HIT, IGNORED, MISS, css};
use crate::picture::Fate;
use crate::plot::Figure;
use crate::sheets::GalleryItem;
use crate::tables::Table;
use crate::text::{command_line, esc, operating_facts};
use std::fmt::Write;
use symtrust_eval::match_log::MatchKind;
use symtrust_eval::record::DetectorInfo;

const STYLE: &str = r#"
:root { --ink: #222; --muted: #555; --rule: #ccc; --warn-bg: #fff4e0; --warn: #8a4b00; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; color: var(--ink);
  margin: 0 auto; max-width: 1120px; padding: 24px 28px 60px; line-height: 1.45; font-size: 15px; }
h1 { font-size: 26px; margin: 0 0 4px; }
h2 { font-size: 20px; margin: 36px 0 10px; padding-top: 10px; border-top: 2px solid var(--ink); }
h3 { font-size: 16px; margin: 22px 0 8px; }
.sub { color: var(--muted); margin: 0 0 16px; }
nav ol { columns: 2; margin: 8px 0 0; padding-left: 22px; }
.statement { font-size: 17px; background: #eef4fb; border-left: 6px solid #1f6fc5; padding: 12px 16px; margin: 10px 0; }
.caution { background: var(--warn-bg); border-left: 6px solid var(--warn); padding: 10px 16px; }
dl.facts { display: grid; grid-template-columns: 260px 1fr; gap: 4px 14px; margin: 0; }
dl.facts dt { font-weight: bold; } dl.facts dd { margin: 0; }
table { border-collapse: collapse; margin: 8px 0; font-size: 13.5px; }
th, td { border: 1px solid var(--rule); padding: 4px 8px; text-align: right; vertical-align: top; }
th { background: #f2f2f2; text-align: center; }
td:first-child, th:first-child { text-align: left; white-space: nowrap; }
#audit-inputs td, #audit-inputs th { text-align: left; }
tr.pooled td { font-weight: bold; background: #fafafa; }
.iv { color: var(--muted); font-size: 12px; white-space: nowrap; font-weight: normal; }
.wide { overflow-x: auto; }
figure { margin: 14px 0; break-inside: avoid; page-break-inside: avoid; }
figure svg, figure img.plot { max-width: 100%; height: auto; display: block; }
figcaption { color: var(--muted); font-size: 13.5px; margin-top: 4px; max-width: 900px; }
.note { color: var(--muted); font-style: italic; }
.gallery { display: flex; flex-wrap: wrap; gap: 10px; }
.gallery figure { width: 150px; margin: 0; font-size: 12px; }
.gallery img { width: 132px; height: auto; border: 1px solid var(--rule); display: block; }
.gallery figcaption { font-size: 12px; color: var(--ink); }
.sheet img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
.legend { display: flex; flex-wrap: wrap; gap: 18px; align-items: center; margin: 6px 0 10px; font-size: 13.5px; }
.legend span { display: inline-flex; align-items: center; gap: 6px; }
code, .mono { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 12.5px; word-break: break-all; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  nav { display: none; }
  h2 { break-before: auto; break-after: avoid; }
  a { color: inherit; text-decoration: none; }
  .sheet a[href]::after { content: " (full resolution: " attr(href) ")"; font-size: 9pt; color: #555; }
  .statement, .caution { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  td, th { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
@page { size: A4; margin: 14mm; }
"#;

fn table_html(t: &Table, pooled_last: bool) -> String {
    let mut s = format!(
        "<div class=\"wide\"><table id=\"table-{}\"><thead><tr>",
        esc(&t.id)
    );
    for h in &t.header {
        let _ = write!(s, "<th>{}</th>", esc(h));
    }
    s.push_str("</tr></thead><tbody>");
    for (i, r) in t.rows.iter().enumerate() {
        if pooled_last && i + 1 == t.rows.len() {
            s.push_str("<tr class=\"pooled\">");
        } else {
            s.push_str("<tr>");
        }
        for c in r {
            // "74.1% (70.0–79.2)": the interval on a line of its own.
            match c.split_once(" (") {
                Some((v, iv)) if iv.ends_with(')') && !v.is_empty() && !v.contains(' ') => {
                    let _ = write!(
                        s,
                        "<td>{}<br><span class=\"iv\">({}</span></td>",
                        esc(v),
                        esc(iv)
                    );
                }
                _ => {
                    let _ = write!(s, "<td>{}</td>", esc(c));
                }
            }
        }
        s.push_str("</tr>");
    }
    s.push_str("</tbody></table></div>");
    s
}

fn figure_html(f: &Figure) -> String {
    format!(
        "<figure id=\"fig-{}\">{}<figcaption><strong>{}.</strong> {}</figcaption></figure>",
        esc(&f.id),
        f.svg,
        esc(&f.title),
        esc(&f.caption)
    )
}

/// A small SVG swatch of one fate's coding, for the legend.
fn swatch(fate: Fate) -> String {
    let c = |x| css(x);
    match fate {
        Fate::Hit => format!(
            "<svg width=\"34\" height=\"24\" aria-hidden=\"true\"><rect x=\"5\" y=\"5\" width=\"24\" height=\"15\" fill=\"none\" stroke=\"{}\" stroke-width=\"2\"/></svg>",
            c(HIT)
        ),
        Fate::FalseAlarm => format!(
            "<svg width=\"34\" height=\"24\" aria-hidden=\"true\"><rect x=\"4\" y=\"7\" width=\"22\" height=\"14\" fill=\"none\" stroke=\"{0}\" stroke-width=\"2\" stroke-dasharray=\"5 3\"/><path d=\"M25 1 L33 9 M25 9 L33 1\" stroke=\"{0}\" stroke-width=\"2\"/></svg>",
            c(FALSE_ALARM)
        ),
        Fate::Miss => format!(
            "<svg width=\"34\" height=\"24\" aria-hidden=\"true\"><rect x=\"6\" y=\"7\" width=\"24\" height=\"14\" fill=\"none\" stroke=\"{0}\" stroke-width=\"4\"/><path d=\"M4 0 L14 0 L4 10 Z\" fill=\"{0}\"/></svg>",
            c(MISS)
        ),
        Fate::Ignored => format!(
            "<svg width=\"34\" height=\"24\" aria-hidden=\"true\"><rect x=\"5\" y=\"5\" width=\"24\" height=\"15\" fill=\"none\" stroke=\"{}\" stroke-width=\"2\" stroke-dasharray=\"2 4\"/></svg>",
            c(IGNORED)
        ),
    }
}

fn legend_html() -> String {
    let mut s = String::from("<div class=\"legend\">");
    for f in [Fate::Hit, Fate::FalseAlarm, Fate::Miss, Fate::Ignored] {
        let _ = write!(s, "<span>{}{}</span>", swatch(f), esc(f.describe()));
    }
    s.push_str("</div>");
    s
}

/// Caption of a gallery crop.
pub fn gallery_caption(g: &GalleryItem) -> String {
    let at = format!("sheet {} at ({:.0}, {:.0})", g.sheet, g.bbox.x, g.bbox.y);
    match g.fate {
        Fate::FalseAlarm => {
            let why = match (g.kind, &g.truth_class) {
                (Some(MatchKind::WrongClass), Some(t)) => format!("on a {t}: wrong class"),
                (Some(MatchKind::Duplicate), _) => "second report of a symbol already found".into(),
                _ => "on no labelled symbol".into(),
            };
            format!(
                "reported {} (score {:.3}); {why}; {at}",
                g.class,
                g.score.unwrap_or(0.0)
            )
        }
        _ => match g.score {
            Some(s) => format!(
                "{} missed: found only at score {s:.3}, below the threshold; {at}",
                g.class
            ),
            None => format!("{} missed: no detection at all; {at}", g.class),
        },
    }
}

fn gallery_html(items: &[GalleryItem], total: usize, what: &str) -> String {
    if total == 0 {
        return format!("<p class=\"note\">No {what} at the operating threshold.</p>");
    }
    let mut s = format!(
        "<p>{} of {total} {what}, worst first.</p><div class=\"gallery\">",
        items.len()
    );
    for g in items {
        let cap = gallery_caption(g);
        let (head, why) = match g.fate {
            Fate::FalseAlarm => (
                format!("{} · score {:.3}", g.class, g.score.unwrap_or(0.0)),
                match (g.kind, &g.truth_class) {
                    (Some(MatchKind::WrongClass), Some(t)) => format!("on a {t} (wrong class)"),
                    (Some(MatchKind::Duplicate), _) => "second report of a found symbol".into(),
                    _ => "on no labelled symbol".into(),
                },
            ),
            _ => (
                g.class.clone(),
                match g.score {
                    Some(sc) => format!("found only at score {sc:.3}, below the threshold"),
                    None => "no detection at all".into(),
                },
            ),
        };
        let _ = write!(
            s,
            "<figure><img src=\"{}\" alt=\"{}\"><figcaption><strong>{}</strong><br>{}<br>{} at ({:.0}, {:.0})</figcaption></figure>",
            png_data_uri(&g.png),
            esc(&cap),
            esc(&head),
            esc(&why),
            esc(&g.sheet),
            g.bbox.x,
            g.bbox.y
        );
    }
    s.push_str("</div>");
    s
}

fn audit_html(r: &Report) -> String {
    let a = &r.audit;
    let mut s = String::new();
    let _ = write!(
        s,
        "<h3>This report</h3><dl class=\"facts\"><dt>Written</dt><dd>{} by {} on {}</dd><dt>Tool</dt><dd>symtrust {}</dd><dt>Command line</dt><dd><code>{}</code></dd><dt>Re-check it</dt><dd><code>symtrust report --verify &lt;this folder&gt;</code> re-hashes every file below and this report's own files</dd></dl>",
        esc(&a.created),
        esc(&a.user),
        esc(&a.host),
        esc(&a.tool_version),
        esc(&command_line(&a.command_line))
    );
    for (i, e) in a.evaluations.iter().enumerate() {
        let _ = write!(
            s,
            "<h3>Evaluation {}: {}</h3><dl class=\"facts\"><dt>Folder</dt><dd><code>{}</code></dd><dt>Evaluated</dt><dd>{} by {} on {}</dd><dt>Tool</dt><dd>symtrust {}</dd><dt>Command line</dt><dd><code>{}</code></dd>",
            i + 1,
            esc(&e.title),
            esc(&e.dir),
            esc(&e.created),
            esc(&e.user),
            esc(&e.host),
            esc(&e.tool_version),
            esc(&command_line(&e.command_line))
        );
        match &e.detector {
            DetectorInfo::Model {
                id,
                weights_sha256,
                card_sha256,
                crop_library,
                crop_manifest_sha256,
                ..
            } => {
                let _ = write!(
                    s,
                    "<dt>Model</dt><dd>{}</dd><dt>Weights SHA-256</dt><dd><code>{}</code></dd><dt>Model card SHA-256</dt><dd><code>{}</code></dd><dt>Crop library</dt><dd>{}</dd><dt>Crop manifest SHA-256</dt><dd><code>{}</code></dd>",
                    esc(id),
                    esc(weights_sha256),
                    esc(card_sha256),
                    esc(crop_library),
                    esc(crop_manifest_sha256)
                );
            }
            DetectorInfo::File {
                path,
                sha256,
                format,
                ..
            } => {
                let _ = write!(
                    s,
                    "<dt>Detections file</dt><dd><code>{}</code> ({})</dd><dt>Its SHA-256</dt><dd><code>{}</code></dd>",
                    esc(path),
                    esc(format),
                    esc(sha256)
                );
            }
        }
        let _ = write!(
            s,
            "<dt>Held-out list</dt><dd>{}</dd></dl>",
            esc(&e.held_out.join(", "))
        );
    }
    s.push_str("<h3>Input files</h3>");
    for (i, site) in a.sites.iter().enumerate() {
        let _ = write!(s, "<p>Site {}: <code>{}</code></p>", i + 1, esc(site));
    }
    s.push_str("<div class=\"wide\"><table id=\"audit-inputs\"><thead><tr><th>File</th><th>Kind</th><th>Site</th><th>SHA-256</th><th>Checked</th></tr></thead><tbody>");
    for f in &a.inputs {
        let role = match f.role {
            Role::Metrics => "evaluation record",
            Role::Sheet => "held-out sheet",
            Role::Labels => "label document",
            Role::Weights => "model weights",
            Role::ModelCard => "model card",
            Role::CropManifest => "crop library manifest",
            Role::TrainingLog => "training log",
            Role::Detections => "detections file",
            Role::Comparison => "comparison record",
        };
        let _ = write!(
            s,
            "<tr><td class=\"mono\">{}</td><td>{}</td><td>{}</td><td class=\"mono\">{}</td><td>{}</td></tr>",
            esc(&f.path),
            role,
            f.site
                .map(|i| (i + 1).to_string())
                .unwrap_or_else(|| "–".into()),
            esc(&f.sha256),
            if f.checked_at_render {
                "re-hashed for this report"
            } else {
                "not found; hash as recorded by the evaluation"
            }
        );
    }
    s.push_str("</tbody></table></div>");
    s
}

/// The whole page.
pub fn page(r: &Report) -> String {
    let main = r.main();
    let rec = &main.record;
    let e = &rec.sheet_level;
    let caution = if rec.caution.trim().is_empty() {
        symtrust_eval::statement::CAUTION.to_string()
    } else {
        rec.caution.clone()
    };
    let mut s = String::with_capacity(1 << 20);
    let _ = write!(
        s,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>Symbol detection report: {}</title><style>{STYLE}</style></head><body>",
        esc(&main.title)
    );
    let _ = write!(
        s,
        "<header><h1>Symbol detection report: {}</h1><p class=\"sub\">{} on {} held-out sheets · evaluated {} · report written {}</p></header>",
        esc(&main.title),
        esc(&crate::text::detector(&rec.detector)),
        e.n_sheets,
        esc(&rec.stamp.created),
        esc(&r.audit.created)
    );
    let mut toc: Vec<(&str, &str)> = vec![
        ("trust", "How far the output can be trusted"),
        ("operating", "Operating point and policy"),
        ("classes", "Per class"),
    ];
    if r.side_by_side.is_some() {
        toc.push(("side-by-side", "Evaluations side by side"));
    }
    if r.comparison.is_some() {
        toc.push(("comparison", "Challenger against champion"));
    }
    toc.extend([
        ("pr", "Precision-recall curves"),
        ("confusion", "Confusion tables"),
        ("calibration", "Reliability of the scores"),
        ("iou", "IoU sweep"),
        ("sheets", "Per sheet"),
        ("training", "Training curves"),
        ("errors", "Errors to look at"),
        ("overlays", "The held-out sheets"),
        ("audit", "Audit stamp"),
        ("files", "Files of this report"),
    ]);
    s.push_str("<nav><strong>Contents</strong><ol>");
    for (id, t) in &toc {
        let _ = write!(s, "<li><a href=\"#{id}\">{t}</a></li>");
    }
    s.push_str("</ol></nav>");
    let _ = write!(
        s,
        "<section id=\"trust\"><h2>How far the output can be trusted</h2><p class=\"statement\">{}</p><p class=\"caution\"><strong>Caution.</strong> {}</p></section>",
        esc(&rec.trust_statement),
        esc(&caution)
    );
    s.push_str("<section id=\"operating\"><h2>Operating point and policy</h2><dl class=\"facts\">");
    for (k, v) in operating_facts(rec) {
        let _ = write!(s, "<dt>{}</dt><dd>{}</dd>", esc(&k), esc(&v));
    }
    s.push_str("</dl></section>");
    let _ = write!(
        s,
        "<section id=\"classes\"><h2>Per class</h2>{}<p class=\"note\">Precision, recall, F1 and the per-sheet rates are at the operating threshold; AP summarises the whole curve. Ranges in brackets are bootstrap intervals over whole sheets; \"–\" means undefined (for example no detections of the class).</p></section>",
        table_html(&r.per_class, true)
    );
    if let Some((t, f)) = &r.side_by_side {
        let _ = write!(
            s,
            "<section id=\"side-by-side\"><h2>Evaluations side by side</h2><p>Each column is one evaluation on its own held-out sheets; the first is the one this report is about.</p>{}{}</section>",
            table_html(t, false),
            figure_html(f)
        );
    }
    if let Some((c, t, f)) = &r.comparison {
        let rec = &c.record;
        let _ = write!(
            s,
            "<section id=\"comparison\"><h2>Challenger against champion</h2><p class=\"statement\">{}</p><dl class=\"facts\"><dt>Champion</dt><dd>{}</dd><dt>Challenger</dt><dd>{}</dd><dt>Outcome</dt><dd>{}</dd><dt>Compared</dt><dd>{} by {} on {}</dd></dl>{}{}{}</section>",
            esc(&rec.summary),
            esc(&crate::text::detector(&rec.champion)),
            esc(&crate::text::detector(&rec.challenger)),
            esc(crate::comparison::outcome(rec.outcome)),
            esc(&rec.stamp.created),
            esc(&rec.stamp.user),
            esc(&rec.stamp.host),
            table_html(t, true),
            figure_html(f),
            crate::comparison::mcnemar_text(rec)
                .map(|m| format!("<p>{}</p>", esc(&m)))
                .unwrap_or_default()
        );
    }
    let fig = |id: &str| r.figure(id).map(figure_html);
    let _ = write!(
        s,
        "<section id=\"pr\"><h2>Precision-recall curves</h2>{}</section>",
        fig("pr-curves").unwrap_or_default()
    );
    s.push_str("<section id=\"confusion\"><h2>Confusion tables</h2>");
    match fig("detection-confusion") {
        Some(f) => s.push_str(&f),
        None => s.push_str(
            "<p class=\"note\">No detection confusion table: there is no operating threshold.</p>",
        ),
    }
    match fig("crop-confusion") {
        Some(f) => s.push_str(&f),
        None => s.push_str("<p class=\"note\">No crop-level table: the detections came from a file, not from a model this run could classify crops with.</p>"),
    }
    s.push_str("</section>");
    let _ = write!(
        s,
        "<section id=\"calibration\"><h2>Reliability of the scores</h2>{}</section>",
        fig("reliability").unwrap_or_else(|| {
            "<p class=\"note\">No detections, so no reliability diagram.</p>".into()
        })
    );
    let _ = write!(
        s,
        "<section id=\"iou\"><h2>IoU sweep</h2>{}</section>",
        fig("iou-sweep").unwrap_or_default()
    );
    let _ = write!(
        s,
        "<section id=\"sheets\"><h2>Per sheet</h2>{}{}</section>",
        fig("sheet-errors").unwrap_or_else(|| {
            "<p class=\"note\">No per-sheet figures: there is no operating threshold.</p>".into()
        }),
        table_html(&r.per_sheet, false)
    );
    let _ = write!(
        s,
        "<section id=\"training\"><h2>Training curves</h2>{}</section>",
        fig("training").unwrap_or_else(|| "<p class=\"note\">No training log: the detector is not a symtrust model, or its folder (with epochs.csv) was not found.</p>".into())
    );
    let (n_fa, n_miss) = r.error_totals;
    let _ = write!(
        s,
        "<section id=\"errors\"><h2>Errors to look at</h2>{}<h3>False alarms</h3>{}<h3>Missed symbols</h3>{}</section>",
        legend_html(),
        gallery_html(&r.false_alarms, n_fa, "false alarms"),
        gallery_html(&r.misses, n_miss, "missed symbols")
    );
    s.push_str("<section id=\"overlays\"><h2>The held-out sheets</h2>");
    if r.sheets.is_empty() {
        s.push_str("<p class=\"note\">No sheet overlays: there is no operating threshold.</p>");
    } else {
        let _ = write!(
            s,
            "<p>Every held-out sheet at the operating threshold, the drawing faded so the marks stand out. Click a sheet for the full-resolution view.</p>{}",
            legend_html()
        );
    }
    for p in &r.sheets {
        let _ = write!(
            s,
            "<figure class=\"sheet\" id=\"sheet-{0}\"><a href=\"{1}\"><img src=\"{2}\" alt=\"sheet {0} with hits, false alarms and misses marked\"></a><figcaption><strong>{0}</strong> ({3} x {4} px): {5}, {6}, {7}. <a href=\"{1}\">Full resolution</a>.</figcaption></figure>",
            esc(&p.sheet),
            esc(&p.full_path),
            png_data_uri(&p.overview_png),
            p.size.0,
            p.size.1,
            crate::text::count(p.counts.0, "hit", "hits"),
            crate::text::count(p.counts.1, "false alarm", "false alarms"),
            crate::text::count(p.counts.2, "missed symbol", "missed symbols")
        );
    }
    s.push_str("</section>");
    let _ = write!(
        s,
        "<section id=\"audit\"><h2>Audit stamp</h2>{}</section>",
        audit_html(r)
    );
    s.push_str("<section id=\"files\"><h2>Files of this report</h2><ul>");
    let _ = write!(
        s,
        "<li><a href=\"{0}\">{0}</a>: the same report in Markdown, figures as PNG</li>",
        crate::SUMMARY_FILE
    );
    for t in &r.csv {
        let _ = write!(
            s,
            "<li><a href=\"tables/{0}.csv\">tables/{0}.csv</a></li>",
            esc(&t.id)
        );
    }
    let _ = write!(
        s,
        "<li><a href=\"{0}\">{0}</a>: the numbers every figure was drawn from</li><li><a href=\"{1}\">{1}</a>: the audit stamp</li></ul></section>",
        crate::FIGURE_DATA_FILE,
        crate::audit::AUDIT_FILE
    );
    s.push_str("</body></html>\n");
    s
}
