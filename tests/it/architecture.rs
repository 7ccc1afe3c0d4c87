//! The house rules of the source tree, read from the code itself: the module import graph has no
//! circle, nothing below the command line imports it, the analysis core imports only the ground
//! (units, sample) and does no I/O, library code keeps its errors typed, only the config layer
//! knows TOML and only the CSV loader knows CSV, and no source file grows past 1,000 lines.
//!
//! The graph is built from `use` trees and inline `crate::`/`super::` paths of every file under
//! src/, each path resolved to the file that defines it (the longest existing module prefix).
//! Test modules (`#[cfg(test)]` to the end of a file) are left out: they are not part of the
//! structure.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// Every Rust source file under src/, relative to the crate root, with its text.
fn sources() -> BTreeMap<PathBuf, String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut out = BTreeMap::new();
    let mut stack = vec![root.join("src")];
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).expect("src/ is readable") {
            let path = entry.expect("a directory entry").path();
            if path.is_dir() {
                stack.push(path);
            } else if path.extension().is_some_and(|e| e == "rs") {
                let text = std::fs::read_to_string(&path).expect("a source file is UTF-8");
                out.insert(path.strip_prefix(root).unwrap().to_owned(), text);
            }
        }
    }
    out
}

/// The file's code without comments and without its trailing test module.
fn structural(text: &str) -> String {
    let code = match text.find("#[cfg(test)]") {
        Some(i) => &text[..i],
        None => text,
    };
    code.lines()
        .map(|line| {
            if line.trim_start().starts_with("//") {
                ""
            } else {
                // A comment after code; `://` in a URL is not one.
                line.find(" //").map_or(line, |i| &line[..i])
            }
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// The module path of a file: src/a/b.rs and src/a/b/mod.rs are `a::b`; lib.rs and main.rs the
/// crate root.
fn module_of(file: &Path) -> Vec<String> {
    let rel = file.strip_prefix("src").expect("under src/");
    let mut parts: Vec<String> = rel
        .iter()
        .map(|p| p.to_string_lossy().into_owned())
        .collect();
    let last = parts.pop().unwrap();
    let stem = last.trim_end_matches(".rs");
    if !matches!(stem, "mod" | "lib" | "main") {
        parts.push(stem.to_owned());
    }
    parts
}

/// Expands a `use` tree such as `crate::a::{self, b::{C, d}}` into full paths.
fn expand_use(tree: &str) -> Vec<String> {
    let tree: String = tree.chars().filter(|c| !c.is_whitespace()).collect();
    let Some(open) = tree.find('{') else {
        return vec![tree.trim_end_matches("::self").to_owned()];
    };
    let prefix = tree[..open].trim_end_matches("::");
    let inner = &tree[open + 1..tree.rfind('}').expect("a closing brace")];
    let mut items = Vec::new();
    let (mut depth, mut start) = (0, 0);
    for (i, c) in inner.char_indices() {
        match c {
            '{' => depth += 1,
            '}' => depth -= 1,
            ',' if depth == 0 => {
                items.push(&inner[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    items.push(&inner[start..]);
    items
        .into_iter()
        .filter(|s| !s.is_empty())
        .flat_map(|item| {
            if item == "self" {
                vec![prefix.to_owned()]
            } else {
                expand_use(&format!("{prefix}::{item}"))
            }
        })
        .collect()
}

/// Every path the code names that starts at `crate`, `super` or (in main.rs) `headroom`.
fn named_paths(code: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut rest = code;
    while let Some(i) = rest.find("use ") {
        let before_ok = i == 0 || !rest.as_bytes()[i - 1].is_ascii_alphanumeric();
        let after = &rest[i + 4..];
        let end = after.find(';').unwrap_or(after.len());
        if before_ok {
            let tree = after[..end].trim();
            if ["crate::", "super::", "headroom::"]
                .iter()
                .any(|p| tree.starts_with(p))
            {
                out.extend(expand_use(tree));
            }
        }
        rest = &after[end.min(after.len())..];
    }
    let bytes = code.as_bytes();
    for start in ["crate::", "super::", "headroom::"] {
        let mut from = 0;
        while let Some(i) = code[from..].find(start) {
            let at = from + i;
            let clean =
                at == 0 || !(bytes[at - 1].is_ascii_alphanumeric() || bytes[at - 1] == b'_');
            let len = code[at..]
                .find(|c: char| !(c.is_alphanumeric() || c == '_' || c == ':'))
                .unwrap_or(code.len() - at);
            if clean {
                out.push(code[at..at + len].trim_end_matches(':').to_owned());
            }
            from = at + len.max(1);
        }
    }
    out
}

/// The source file that defines the module a path names (its longest existing module prefix).
fn resolve(path: &str, from: &Path, files: &BTreeSet<PathBuf>) -> Option<PathBuf> {
    let mut segments: Vec<&str> = path.split("::").filter(|s| !s.is_empty()).collect();
    let mut module: Vec<String> = match segments.first() {
        Some(&"crate") | Some(&"headroom") => {
            segments.remove(0);
            Vec::new()
        }
        Some(&"super") => {
            let mut m = module_of(from);
            while segments.first() == Some(&"super") {
                segments.remove(0);
                m.pop();
            }
            m
        }
        _ => return None,
    };
    let base = module.len();
    module.extend(segments.iter().map(|s| s.to_string()));
    for len in (base.max(1)..=module.len()).rev() {
        let dir: PathBuf = std::iter::once("src".to_owned())
            .chain(module[..len].iter().cloned())
            .collect();
        for candidate in [dir.with_extension("rs"), dir.join("mod.rs")] {
            if files.contains(&candidate) {
                return Some(candidate);
            }
        }
    }
    None
}

/// File → the other files it imports.
fn import_graph() -> BTreeMap<PathBuf, BTreeSet<PathBuf>> {
    let sources = sources();
    let files: BTreeSet<PathBuf> = sources.keys().cloned().collect();
    sources
        .iter()
        .map(|(file, text)| {
            let targets = named_paths(&structural(text))
                .iter()
                .filter_map(|p| resolve(p, file, &files))
                .filter(|t| t != file)
                .collect();
            (file.clone(), targets)
        })
        .collect()
}

/// Whether a file is the module `dir` or inside it (`src/cli.rs` or `src/cli/…`).
fn under(file: &Path, dir: &str) -> bool {
    file.starts_with(dir) || file == Path::new(&format!("{dir}.rs"))
}

#[test]
fn the_import_graph_of_src_has_no_circle() {
    let graph = import_graph();
    // Tarjan's strongly connected components; any component of two or more files is a circle.
    struct State<'g> {
        graph: &'g BTreeMap<PathBuf, BTreeSet<PathBuf>>,
        index: BTreeMap<&'g PathBuf, usize>,
        low: BTreeMap<&'g PathBuf, usize>,
        stack: Vec<&'g PathBuf>,
        on_stack: BTreeSet<&'g PathBuf>,
        circles: Vec<Vec<&'g PathBuf>>,
    }
    fn visit<'g>(s: &mut State<'g>, v: &'g PathBuf) {
        let i = s.index.len();
        s.index.insert(v, i);
        s.low.insert(v, i);
        s.stack.push(v);
        s.on_stack.insert(v);
        for w in s.graph.get(v).into_iter().flatten() {
            if !s.index.contains_key(w) {
                visit(s, w);
                let lw = s.low[w];
                let lv = s.low.get_mut(v).unwrap();
                *lv = (*lv).min(lw);
            } else if s.on_stack.contains(w) {
                let iw = s.index[w];
                let lv = s.low.get_mut(v).unwrap();
                *lv = (*lv).min(iw);
            }
        }
        if s.low[v] == s.index[v] {
            let mut component = Vec::new();
            while let Some(w) = s.stack.pop() {
                s.on_stack.remove(w);
                component.push(w);
                if w == v {
                    break;
                }
            }
            if component.len() > 1 {
                s.circles.push(component);
            }
        }
    }
    let mut state = State {
        graph: &graph,
        index: BTreeMap::new(),
        low: BTreeMap::new(),
        stack: Vec::new(),
        on_stack: BTreeSet::new(),
        circles: Vec::new(),
    };
    for v in graph.keys() {
        if !state.index.contains_key(v) {
            visit(&mut state, v);
        }
    }
    assert!(
        state.circles.is_empty(),
        "import circles: {:?}",
        state.circles
    );
}

#[test]
fn no_library_module_imports_the_command_line() {
    for (file, targets) in import_graph() {
        if under(&file, "src/cli") || file == Path::new("src/main.rs") {
            continue;
        }
        let upward: Vec<_> = targets.iter().filter(|t| under(t, "src/cli")).collect();
        assert!(upward.is_empty(), "{} imports {upward:?}", file.display());
    }
}

#[test]
fn the_analysis_core_imports_only_itself_and_the_ground() {
    let ground = [Path::new("src/units.rs"), Path::new("src/sample.rs")];
    let graph = import_graph();
    for (file, targets) in &graph {
        if !under(file, "src/analysis") {
            continue;
        }
        let outside: Vec<_> = targets
            .iter()
            .filter(|t| !under(t, "src/analysis") && !ground.contains(&t.as_path()))
            .collect();
        assert!(outside.is_empty(), "{} imports {outside:?}", file.display());
    }
    for g in ground {
        let targets = &graph[g];
        assert!(
            targets.is_empty(),
            "{} is ground but imports {targets:?}",
            g.display()
        );
    }
}

#[test]
fn the_analysis_core_does_no_io_reads_no_clock_and_has_no_async() {
    let forbidden = [
        "tokio",
        "std::fs",
        "std::net",
        "std::io::stdin",
        "std::env",
        "SystemTime",
        "Instant::now",
        "Timestamp::now",
        "Zoned::now",
        "thread::sleep",
        "async ",
        ".await",
        "println!",
        "eprintln!",
        "tracing::",
    ];
    for (file, text) in sources() {
        if !under(&file, "src/analysis") {
            continue;
        }
        let code = structural(&text);
        for word in forbidden {
            assert!(!code.contains(word), "{} uses {word:?}", file.display());
        }
    }
}

#[test]
fn library_errors_are_typed_not_strings() {
    let sources = sources();
    for (file, text) in &sources {
        let code: String = text.chars().filter(|c| !c.is_whitespace()).collect();
        let mut from = 0;
        while let Some(i) = code[from..].find("Result<") {
            let at = from + i + "Result<".len();
            // The second type argument at depth 0 of this Result.
            let mut depth = 0;
            let mut comma = None;
            for (j, c) in code[at..].char_indices() {
                match c {
                    '<' | '(' | '[' => depth += 1,
                    ')' | ']' => depth -= 1,
                    '>' if depth == 0 => break,
                    '>' => depth -= 1,
                    ',' if depth == 0 => {
                        comma = Some(at + j + 1);
                        break;
                    }
                    _ => {}
                }
            }
            if let Some(c) = comma {
                assert!(
                    !code[c..].starts_with("String>"),
                    "{} has a Result with a String error",
                    file.display()
                );
            }
            from = at;
        }
    }
}

#[test]
fn only_the_config_layer_reads_toml_and_only_the_loader_reads_csv() {
    for (file, text) in sources() {
        let code = structural(&text);
        if code.contains("toml::") {
            assert!(under(&file, "src/config"), "{} uses toml", file.display());
        }
        if code.contains("csv::") {
            assert!(under(&file, "src/csvload"), "{} uses csv", file.display());
        }
    }
}

#[test]
fn no_source_file_is_over_a_thousand_lines() {
    for (file, text) in sources() {
        let lines = text.lines().count();
        assert!(lines <= 1000, "{} has {lines} lines", file.display());
    }
}

#[test]
fn the_graph_reader_resolves_use_trees_and_relative_paths() {
    assert_eq!(
        expand_use("crate::a::{self, b::{C, d}, e}"),
        [
            "crate::a",
            "crate::a::b::C",
            "crate::a::b::d",
            "crate::a::e"
        ]
    );
    let files: BTreeSet<PathBuf> = ["src/a/mod.rs", "src/a/b.rs", "src/c.rs"]
        .into_iter()
        .map(PathBuf::from)
        .collect();
    let from = Path::new("src/a/b.rs");
    assert_eq!(
        resolve("super::super::c::Thing", from, &files),
        Some("src/c.rs".into())
    );
    assert_eq!(
        resolve("super::Item", from, &files),
        Some("src/a/mod.rs".into())
    );
    assert_eq!(
        resolve("crate::a::b::f", from, &files),
        Some("src/a/b.rs".into())
    );
    assert_eq!(resolve("std::fs", from, &files), None);
    assert_eq!(module_of(Path::new("src/a/mod.rs")), ["a"]);
    assert!(named_paths("let x = crate::c::f(); use super::{y, z};").len() >= 3);
}
