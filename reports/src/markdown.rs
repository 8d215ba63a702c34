//! `summary.md`: the report in Markdown, for a repository or a ticket; the
//! figures are the PNG copies under `figures/`, the sheets and crops the PNG
//! files under `sheets/` and `gallery/`.

use crate::Report;
use crate::html::gallery_caption;
use crate::picture::Fate;
use crate::tables::Table;
use crate::text::{command_line, md_cell, operating_facts};
use std::fmt::Write;

fn table_md(t: &Table) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "| {} |",
        t.header
            .iter()
            .map(|h| md_cell(h))
            .collect::<Vec<_>>()
            .join(" | ")
    );
    let _ = writeln!(s, "|{}", "---|".repeat(t.header.len()));
    for r in &t.rows {
        let _ = writeln!(
            s,
            "| {} |",
            r.iter().map(|c| md_cell(c)).collect::<Vec<_>>().join(" | ")
        );
    }
    s
}

fn figure_md(r: &Report, id: &str) -> String {
    match r.figure(id) {
        Some(f) => format!(
            "![{}](figures/{}.png)\n\n*{}.* {}\n\n",
            f.title, f.id, f.title, f.caption
        ),
        None => String::new(),
    }
}

/// The whole summary.
pub fn summary(r: &Report) -> String {
    let main = r.main();
    let rec = &main.record;
    let mut s = String::new();
    let _ = writeln!(s, "# Symbol detection report: {}\n", main.title);
    let _ = writeln!(
        s,
        "{} on {} held-out sheets; evaluated {}; report written {}.\n",
        crate::text::detector(&rec.detector),
        rec.sheet_level.n_sheets,
        rec.stamp.created,
        r.audit.created
    );
    let _ = writeln!(
        s,
        "## How far the output can be trusted\n\n> {}\n",
        rec.trust_statement
    );
    let caution = if rec.caution.trim().is_empty() {
        symtrust_eval::statement::CAUTION
    } else {
        &rec.caution
    };
    let _ = writeln!(s, "**Caution.** {caution}\n");
    s.push_str("## Operating point and policy\n\n");
    for (k, v) in operating_facts(rec) {
        let _ = writeln!(s, "- **{k}:** {v}");
    }
    s.push_str("\n## Per class\n\n");
    s.push_str(&table_md(&r.per_class));
    s.push('\n');
    if let Some((t, f)) = &r.side_by_side {
        s.push_str("## Evaluations side by side\n\n");
        s.push_str(&table_md(t));
        let _ = writeln!(
            s,
            "\n![{}](figures/{}.png)\n\n*{}.* {}\n",
            f.title, f.id, f.title, f.caption
        );
    }
    if let Some((c, t, _)) = &r.comparison {
        let _ = writeln!(
            s,
            "## Challenger against champion\n\n> {}\n\n- **Champion:** {}\n- **Challenger:** {}\n- **Outcome:** {}\n",
            c.record.summary,
            crate::text::detector(&c.record.champion),
            crate::text::detector(&c.record.challenger),
            crate::comparison::outcome(c.record.outcome)
        );
        s.push_str(&table_md(t));
        s.push('\n');
        s.push_str(&figure_md(r, "comparison"));
        if let Some(m) = crate::comparison::mcnemar_text(&c.record) {
            let _ = writeln!(s, "{m}\n");
        }
    }
    s.push_str("## Precision-recall curves\n\n");
    s.push_str(&figure_md(r, "pr-curves"));
    s.push_str("## Confusion tables\n\n");
    s.push_str(&figure_md(r, "detection-confusion"));
    s.push_str(&figure_md(r, "crop-confusion"));
    s.push_str("## Reliability of the scores\n\n");
    s.push_str(&figure_md(r, "reliability"));
    s.push_str("## IoU sweep\n\n");
    s.push_str(&figure_md(r, "iou-sweep"));
    s.push_str("## Per sheet\n\n");
    s.push_str(&figure_md(r, "sheet-errors"));
    s.push_str(&table_md(&r.per_sheet));
    s.push_str("\n## Training curves\n\n");
    match r.figure("training") {
        Some(_) => s.push_str(&figure_md(r, "training")),
        None => s.push_str("No training log was found for this detector.\n\n"),
    }
    let (n_fa, n_miss) = r.error_totals;
    s.push_str("## Errors to look at\n\n");
    for f in [Fate::Hit, Fate::FalseAlarm, Fate::Miss, Fate::Ignored] {
        let _ = writeln!(s, "- {}", f.describe());
    }
    s.push('\n');
    for (title, items, total) in [
        ("False alarms", &r.false_alarms, n_fa),
        ("Missed symbols", &r.misses, n_miss),
    ] {
        let _ = writeln!(
            s,
            "### {title} ({} of {total} shown, worst first)\n",
            items.len()
        );
        for g in items.iter() {
            let cap = gallery_caption(g);
            let _ = writeln!(s, "- ![{cap}]({}) {cap}", g.path);
        }
        s.push('\n');
    }
    s.push_str("## The held-out sheets\n\n");
    for p in &r.sheets {
        let _ = writeln!(
            s,
            "### {}\n\n[![sheet {}]({})]({})\n\n{} hits, {} false alarms, {} missed symbols; [full resolution]({}).\n",
            p.sheet,
            p.sheet,
            p.overview_path,
            p.full_path,
            p.counts.0,
            p.counts.1,
            p.counts.2,
            p.full_path
        );
    }
    let a = &r.audit;
    s.push_str("## Audit stamp\n\n");
    let _ = writeln!(
        s,
        "- **Report written:** {} by {} on {} with symtrust {}\n- **Command line:** `{}`\n- **Re-check:** `symtrust report --verify <this folder>`",
        a.created,
        a.user,
        a.host,
        a.tool_version,
        command_line(&a.command_line)
    );
    for e in &a.evaluations {
        let _ = writeln!(
            s,
            "- **Evaluation {}:** {} by {} on {} with symtrust {}; `{}`; held out: {}",
            e.title,
            e.created,
            e.user,
            e.host,
            e.tool_version,
            command_line(&e.command_line),
            e.held_out.join(", ")
        );
    }
    for (i, site) in a.sites.iter().enumerate() {
        let _ = writeln!(s, "- **Site {}:** `{site}`", i + 1);
    }
    s.push_str("\n| File | Kind | Site | SHA-256 |\n|---|---|---|---|\n");
    for f in &a.inputs {
        let role = serde_json::to_value(f.role)
            .ok()
            .and_then(|v| v.as_str().map(str::to_string))
            .unwrap_or_default();
        let _ = writeln!(
            s,
            "| `{}` | {} | {} | `{}`{} |",
            md_cell(&f.path),
            role,
            f.site
                .map(|i| (i + 1).to_string())
                .unwrap_or_else(|| "–".into()),
            f.sha256,
            if f.checked_at_render {
                ""
            } else {
                " (not found; as recorded)"
            }
        );
    }
    s
}
