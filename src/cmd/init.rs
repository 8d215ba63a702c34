//! `symtrust init [DIR]`: create a site folder with a commented `site.toml`.

use crate::context::Ctx;
use crate::exit;
use clap::Args;
use std::path::PathBuf;
use symtrust_labels::site::{ClassSpec, Site, SiteConfig};

/// Arguments of `symtrust init`.
#[derive(Debug, Args)]
pub struct InitArgs {
    /// Folder to create the site in (default: `--site`, else the current folder).
    pub dir: Option<PathBuf>,
    /// A name for the site.
    #[arg(long, default_value = "my site")]
    pub name: String,
}

/// Creates the site.
pub fn run(ctx: &Ctx, args: &InitArgs) -> anyhow::Result<u8> {
    let dir = args.dir.clone().unwrap_or_else(|| ctx.site_dir.clone());
    let config = SiteConfig::new(&args.name, starter_classes());
    let site = Site::create(&dir, config)?;
    if ctx.json {
        ctx.print_json(
            &serde_json::json!({ "site": site.root, "classes": site.config.class_names() }),
        )?;
    } else {
        ctx.say(format!(
            "created site {} with {} starter classes; edit {} to match your drafting standard, then `symtrust sheets add --site {} FILE...`",
            site.root.display(),
            site.config.classes.len(),
            site.root.join("site.toml").display(),
            site.root.display()
        ));
    }
    Ok(exit::OK)
}

/// Starter classes a new site begins with: the three ISA-5.1 bubble forms.
fn starter_classes() -> Vec<ClassSpec> {
    let bubble = |name: &str, description: &str| ClassSpec {
        name: name.to_string(),
        description: description.to_string(),
        nominal_mm: 11.0,
        rotatable: false,
    };
    vec![
        bubble(
            "bubble_field",
            "instrument bubble, plain circle: discrete instrument, field mounted",
        ),
        bubble(
            "bubble_shared",
            "circle in a square: shared display or shared control",
        ),
        bubble(
            "bubble_board",
            "circle with a horizontal bar: located in a main control room",
        ),
    ]
}
