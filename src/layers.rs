//! The layer rule, guarded: every top-level module sits on a layer, and a module may name
//! (`crate::x`) only modules on layers below its own. Lower layers know nothing of the ones
//! above them, so there is no import circle between modules. Inside a module folder, the files
//! that name each other (`super::x`) form no circle either. The table is the one in
//! docs/ARCHITECTURE.md; these tests read the source files and fail on an upward arrow or a
//! circle.

/// Layers, lowest first.
const LAYERS: &[&[&str]] = &[
    &["quantity", "measure", "config", "rng", "capability", "par"],
    &["design", "protocol", "transport", "control", "guardian"],
    &["record", "bench", "sim", "spice"],
    &["analysis", "station"],
    &["plan", "compare"],
    &["floor"],
    &["runner", "report", "index", "store"],
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

/// The sibling modules a file inside a module folder names through `super::` (library code
/// only, as in [`named_modules`]), among `siblings`.
fn named_siblings(text: &str, siblings: &[String]) -> Vec<String> {
    let mut out = Vec::new();
    for line in text.lines() {
        if line.trim_start().starts_with("#[cfg(test)]") {
            break;
        }
        let code = line.split("//").next().unwrap_or("");
        let mut rest = code;
        while let Some(p) = rest.find("super::") {
            let after = &rest[p + "super::".len()..];
            let names: Vec<&str> = match after.strip_prefix('{') {
                Some(group) => group
                    .split('}')
                    .next()
                    .unwrap_or("")
                    .split(',')
                    .map(|item| item.trim().split("::").next().unwrap_or(""))
                    .collect(),
                None => vec![after
                    .split(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))
                    .next()
                    .unwrap_or("")],
            };
            for n in names {
                if siblings.iter().any(|s| s == n) && !out.iter().any(|o| o == n) {
                    out.push(n.to_string());
                }
            }
            rest = after;
        }
    }
    out
}

/// A circle in a graph given as (node, the nodes it names), if there is one.
fn find_circle(graph: &[(String, Vec<String>)]) -> Option<Vec<String>> {
    fn visit(
        node: &str,
        graph: &[(String, Vec<String>)],
        path: &mut Vec<String>,
        done: &mut Vec<String>,
    ) -> Option<Vec<String>> {
        if let Some(start) = path.iter().position(|p| p == node) {
            let mut circle = path[start..].to_vec();
            circle.push(node.to_string());
            return Some(circle);
        }
        if done.iter().any(|d| d == node) {
            return None;
        }
        path.push(node.to_string());
        let next = graph
            .iter()
            .find(|(n, _)| n == node)
            .map(|(_, e)| e.clone());
        for m in next.unwrap_or_default() {
            if let Some(c) = visit(&m, graph, path, done) {
                return Some(c);
            }
        }
        path.pop();
        done.push(node.to_string());
        None
    }
    let mut done = Vec::new();
    graph
        .iter()
        .find_map(|(n, _)| visit(n, graph, &mut Vec::new(), &mut done))
}

#[test]
fn finds_siblings_and_circles() {
    let sib = vec!["a".to_string(), "b".to_string(), "c".to_string()];
    let text = "use super::{a, b::X};\nuse super::c::Y; // super::zz\n";
    assert_eq!(named_siblings(text, &sib), vec!["a", "b", "c"]);
    let g = |edges: &[(&str, &[&str])]| -> Vec<(String, Vec<String>)> {
        edges
            .iter()
            .map(|(n, e)| (n.to_string(), e.iter().map(|x| x.to_string()).collect()))
            .collect()
    };
    assert_eq!(
        find_circle(&g(&[("a", &["b"]), ("b", &["c"]), ("c", &[])])),
        None
    );
    assert_eq!(
        find_circle(&g(&[("a", &["b"]), ("b", &["a"])])),
        Some(vec!["a".to_string(), "b".to_string(), "a".to_string()])
    );
}

#[test]
fn files_in_a_module_folder_form_no_circle() {
    fn folders(dir: &std::path::Path, out: &mut Vec<std::path::PathBuf>) {
        for entry in std::fs::read_dir(dir)
            .expect("readable source folder")
            .flatten()
        {
            if entry.path().is_dir() {
                out.push(entry.path());
                folders(&entry.path(), out);
            }
        }
    }
    let src = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut dirs = Vec::new();
    folders(&src, &mut dirs);
    let mut circles = Vec::new();
    for dir in dirs {
        let mut files = Vec::new();
        for entry in std::fs::read_dir(&dir).expect("readable folder").flatten() {
            let p = entry.path();
            let stem = p
                .file_stem()
                .and_then(|s| s.to_str())
                .unwrap_or("")
                .to_string();
            if p.extension().is_some_and(|e| e == "rs") && stem != "mod" && stem != "tests" {
                files.push((stem, p));
            }
        }
        let names: Vec<String> = files.iter().map(|(n, _)| n.clone()).collect();
        let graph: Vec<(String, Vec<String>)> = files
            .iter()
            .map(|(n, p)| {
                let text = std::fs::read_to_string(p).expect("readable source file");
                let mut named = named_siblings(&text, &names);
                named.retain(|m| m != n);
                (n.clone(), named)
            })
            .collect();
        if let Some(c) = find_circle(&graph) {
            circles.push(format!("{}: {}", dir.display(), c.join(" -> ")));
        }
    }
    assert!(
        circles.is_empty(),
        "import circles:\n{}",
        circles.join("\n")
    );
}
