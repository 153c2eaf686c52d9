//! The Tera templates, compiled into the binary so that `arcwright` runs from anywhere.
//! Autoescaping is off: these are source files, not HTML.

use std::sync::OnceLock;
use tera::{Context, Tera};

const TEMPLATES: &[(&str, &str)] = &[
    (
        "c/header.h",
        include_str!("../../../templates/c/header.h.tera"),
    ),
    (
        "c/source.c",
        include_str!("../../../templates/c/source.c.tera"),
    ),
    (
        "c/statics.c",
        include_str!("../../../templates/c/statics.c.tera"),
    ),
    ("c/test.c", include_str!("../../../templates/c/test.c.tera")),
    (
        "rust/Cargo.toml",
        include_str!("../../../templates/rust/Cargo.toml.tera"),
    ),
    (
        "rust/lib.rs",
        include_str!("../../../templates/rust/lib.rs.tera"),
    ),
    (
        "rust/golden.rs",
        include_str!("../../../templates/rust/golden.rs.tera"),
    ),
    (
        "python/module.py",
        include_str!("../../../templates/python/module.py.tera"),
    ),
    (
        "python/test.py",
        include_str!("../../../templates/python/test.py.tera"),
    ),
];

fn tera() -> Result<&'static Tera, String> {
    static TERA: OnceLock<Result<Tera, String>> = OnceLock::new();
    TERA.get_or_init(|| {
        let mut t = Tera::default();
        t.autoescape_on(Vec::new());
        t.add_raw_templates(TEMPLATES.iter().copied())
            .map_err(|e| format!("template error: {e:?}"))?;
        Ok(t)
    })
    .as_ref()
    .map_err(Clone::clone)
}

/// Renders one template.
pub fn render(name: &str, ctx: &Context) -> Result<String, String> {
    let t = tera()?;
    t.render(name, ctx).map_err(|e| {
        let mut msg = format!("rendering {name}: {e}");
        let mut src = std::error::Error::source(&e);
        while let Some(s) = src {
            msg.push_str(&format!(": {s}"));
            src = s.source();
        }
        msg
    })
}
