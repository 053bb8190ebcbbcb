//! The layer rule, guarded: every top-level module sits on a layer, and a module may name
//! (`crate::x`) only modules on layers below its own. Lower layers know nothing of the ones
//! above them, so there is no import circle between modules. The table is the one in
//! docs/ARCHITECTURE.md; this test reads the source files and fails on an upward arrow.

/// Layers, lowest first.
const LAYERS: &[&[&str]] = &[
    &["quantity", "measure", "config", "rng"],
    &["design", "protocol", "transport", "control"],
    &["record", "bench", "sim", "spice"],
    &["analysis"],
    &["plan", "compare"],
    &["runner", "report"],
    &["pipeline", "testkit"],
    &["cli"],
];

fn layer_of(module: &str) -> Option<usize> {
    LAYERS.iter().position(|l| l.contains(&module))
}

/// The top-level modules a source text names through `crate::`, ignoring comments and unit
/// tests (from the first `#[cfg(test)]` on: test code may use the test kit).
fn named_modules(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    for line in text.lines() {
        if line.trim_start().starts_with("#[cfg(test)]") {
            break;
        }
        let code = line.split("//").next().unwrap_or("");
        let mut rest = code;
        while let Some(p) = rest.find("crate::") {
            let after = &rest[p + "crate::".len()..];
            let name: String = after
                .chars()
                .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
                .collect();
            if !name.is_empty() && !out.contains(&name) {
                out.push(name);
            }
            rest = after;
        }
    }
    out
}

fn rust_files(dir: &std::path::Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in std::fs::read_dir(dir)
        .expect("readable source folder")
        .flatten()
    {
        let p = entry.path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|e| e == "rs") {
            out.push(p);
        }
    }
}

#[test]
fn finds_the_modules_a_line_names() {
    let text =
        "use crate::plan::{Plan, Step};\nlet x = crate::quantity::eng(1.0, \"V\"); // crate::cli\n#[cfg(test)]\nuse crate::testkit::SoftKnee;\n";
    assert_eq!(named_modules(text), vec!["plan", "quantity"]);
}

#[test]
fn dependencies_point_down_only() {
    let src = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let mut upward = Vec::new();
    let mut unplaced = Vec::new();
    for f in &files {
        let rel = f.strip_prefix(&src).expect("inside src");
        let top = rel
            .components()
            .next()
            .and_then(|c| c.as_os_str().to_str())
            .unwrap_or("")
            .trim_end_matches(".rs")
            .to_string();
        // The crate root and this file declare every module; `tests.rs` files are unit tests.
        if matches!(top.as_str(), "lib" | "main" | "layers")
            || f.file_name().is_some_and(|n| n == "tests.rs")
        {
            continue;
        }
        let Some(own) = layer_of(&top) else {
            unplaced.push(top);
            continue;
        };
        let text = std::fs::read_to_string(f).expect("readable source file");
        for m in named_modules(&text) {
            if m == top {
                continue;
            }
            match layer_of(&m) {
                Some(l) if l < own => {}
                Some(_) => upward.push(format!("{} names crate::{m}", rel.display())),
                None => unplaced.push(m),
            }
        }
    }
    unplaced.sort();
    unplaced.dedup();
    assert!(
        unplaced.is_empty(),
        "modules missing from the layer table: {unplaced:?}"
    );
    assert!(
        upward.is_empty(),
        "imports that point up or sideways:\n{}",
        upward.join("\n")
    );
}
