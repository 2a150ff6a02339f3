//! The crate's top-level modules form no import cycle, and the kernels in
//! `linalg` see none of the problem-aware modules.
//!
//! Reads every `src/**/*.rs`, collects the `crate::<module>` paths its code
//! names (comments, doc comments and the unit-test module at the end of a
//! file skipped; a root re-export such as
//! `crate::Qr` is traced to the module `lib.rs` takes it from), and looks for
//! a cycle between top-level modules by depth-first search.

use std::collections::{BTreeMap, BTreeSet};
use std::fs;
use std::path::{Path, PathBuf};

type Graph = BTreeMap<String, BTreeSet<String>>;

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let mut entries: Vec<_> = fs::read_dir(dir)
        .expect("src/ is readable")
        .map(|e| e.expect("directory entry").path())
        .collect();
    entries.sort();
    for path in entries {
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The code of a file without its comments (line comments, doc comments and
/// block comments); string literals are kept, which is harmless here.
fn code_only(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    let mut rest = text;
    while !rest.is_empty() {
        if let Some(after) = rest.strip_prefix("//") {
            rest = after.find('\n').map_or("", |i| &after[i..]);
        } else if let Some(after) = rest.strip_prefix("/*") {
            rest = after.find("*/").map_or("", |i| &after[i + 2..]);
        } else {
            let c = rest.chars().next().expect("non-empty");
            out.push(c);
            rest = &rest[c.len_utf8()..];
        }
    }
    out
}

fn ident_at(s: &str) -> &str {
    let end = s
        .find(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))
        .unwrap_or(s.len());
    &s[..end]
}

/// Every name that follows `crate::` in the code, including each first
/// segment inside a `crate::{a::X, b}` group.
fn crate_names(code: &str) -> Vec<String> {
    let mut names = Vec::new();
    for (i, _) in code.match_indices("crate::") {
        // `$crate::` in macros names the crate too; a longer identifier
        // ending in `crate` (e.g. `mycrate::`) does not.
        let before = code[..i].chars().next_back();
        if before.is_some_and(|c| c.is_ascii_alphanumeric() || c == '_') {
            continue;
        }
        let rest = &code[i + "crate::".len()..];
        if let Some(group) = rest.strip_prefix('{') {
            let mut depth = 0usize;
            let mut start = true;
            for (j, c) in group.char_indices() {
                match c {
                    '{' => depth += 1,
                    '}' if depth == 0 => break,
                    '}' => depth -= 1,
                    ',' if depth == 0 => start = true,
                    c if c.is_whitespace() => {}
                    _ if start && depth == 0 => {
                        names.push(ident_at(&group[j..]).to_string());
                        start = false;
                    }
                    _ => start = false,
                }
            }
        } else {
            names.push(ident_at(rest).to_string());
        }
    }
    names
}

/// Top-level modules declared in lib.rs, and where each root re-export
/// (`pub use module::{A, B}`) comes from.
fn root_items(lib: &str) -> (BTreeSet<String>, BTreeMap<String, String>) {
    let mut modules = BTreeSet::new();
    let mut reexports = BTreeMap::new();
    let code = code_only(lib);
    for statement in code.split(';') {
        let s = statement.split_whitespace().collect::<Vec<_>>().join(" ");
        let s = s.trim_start_matches(|c| c != 'p' && c != 'm' && c != 'u');
        if let Some(pos) = s.find("mod ") {
            let head = &s[..pos];
            if head.is_empty() || head.ends_with("pub ") || head.ends_with(") ") {
                let name = ident_at(&s[pos + 4..]);
                if !name.is_empty() && !s[pos + 4..].contains('{') {
                    modules.insert(name.to_string());
                }
            }
        }
        if let Some(pos) = s.find("pub use ") {
            let path = &s[pos + "pub use ".len()..];
            let module = ident_at(path).to_string();
            let tail = &path[module.len()..];
            let tail = tail.trim_start_matches("::");
            let items: Vec<&str> = if let Some(group) = tail.strip_prefix('{') {
                group.trim_end_matches('}').split(',').collect()
            } else {
                vec![tail]
            };
            for item in items {
                let last = item.trim().rsplit("::").next().unwrap_or("").trim();
                if !last.is_empty() {
                    reexports.insert(last.to_string(), module.clone());
                }
            }
        }
    }
    (modules, reexports)
}

fn module_graph() -> Graph {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let lib = fs::read_to_string(src.join("lib.rs")).expect("src/lib.rs");
    let (modules, reexports) = root_items(&lib);
    assert!(
        modules.len() >= 10 && modules.contains("linalg") && modules.contains("error"),
        "lib.rs parsed into too few modules: {modules:?}"
    );
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let mut graph: Graph = modules
        .iter()
        .map(|m| (m.clone(), BTreeSet::new()))
        .collect();
    for file in files {
        let relative = file.strip_prefix(&src).expect("under src");
        let first = relative
            .components()
            .next()
            .expect("a path")
            .as_os_str()
            .to_string_lossy()
            .trim_end_matches(".rs")
            .to_string();
        if first == "lib" || first == "main" || !modules.contains(&first) {
            continue;
        }
        let source = fs::read_to_string(&file).expect("readable source");
        // A unit-test module (the end of a file, by the crate's custom) may
        // use any module: it is not part of the library's import graph.
        let library = &source[..unit_tests_at(&source)];
        let code = code_only(library);
        for name in crate_names(&code) {
            let target = if modules.contains(&name) {
                Some(name)
            } else {
                reexports.get(&name).cloned()
            };
            if let Some(target) = target {
                if target != first && modules.contains(&target) {
                    graph.get_mut(&first).expect("module").insert(target);
                }
            }
        }
    }
    graph
}

/// Where a file's unit-test module begins (`#[cfg(test)]`, then any other
/// attributes, then `mod tests`), or its length when it has none.
fn unit_tests_at(source: &str) -> usize {
    let mut from = 0;
    while let Some(found) = source[from..].find("#[cfg(test)]") {
        let at = from + found;
        let mut rest = source[at + "#[cfg(test)]".len()..].trim_start();
        while rest.starts_with("#[") {
            match rest.find(']') {
                Some(end) => rest = rest[end + 1..].trim_start(),
                None => break,
            }
        }
        if rest.starts_with("mod tests") {
            return at;
        }
        from = at + 1;
    }
    source.len()
}

/// A cycle, as the list of modules along it, if the graph has one.
fn find_cycle(graph: &Graph) -> Option<Vec<String>> {
    #[derive(Clone, Copy, PartialEq)]
    enum Mark {
        New,
        Open,
        Done,
    }
    fn visit(
        node: &str,
        graph: &Graph,
        marks: &mut BTreeMap<String, Mark>,
        stack: &mut Vec<String>,
    ) -> Option<Vec<String>> {
        marks.insert(node.to_string(), Mark::Open);
        stack.push(node.to_string());
        for next in graph.get(node).into_iter().flatten() {
            match marks.get(next.as_str()).copied().unwrap_or(Mark::New) {
                Mark::Open => {
                    let from = stack.iter().position(|m| m == next).expect("on stack");
                    let mut cycle = stack[from..].to_vec();
                    cycle.push(next.clone());
                    return Some(cycle);
                }
                Mark::New => {
                    if let Some(c) = visit(next, graph, marks, stack) {
                        return Some(c);
                    }
                }
                Mark::Done => {}
            }
        }
        stack.pop();
        marks.insert(node.to_string(), Mark::Done);
        None
    }
    let mut marks = BTreeMap::new();
    for node in graph.keys() {
        if marks.get(node.as_str()).copied().unwrap_or(Mark::New) == Mark::New {
            let mut stack = Vec::new();
            if let Some(c) = visit(node, graph, &mut marks, &mut stack) {
                return Some(c);
            }
        }
    }
    None
}

#[test]
fn the_search_finds_a_planted_cycle_and_accepts_a_chain() {
    let mut graph: Graph = BTreeMap::new();
    for (a, b) in [("a", "b"), ("b", "c"), ("a", "c")] {
        graph.entry(a.into()).or_default().insert(b.into());
    }
    graph.entry("c".into()).or_default();
    assert_eq!(find_cycle(&graph), None);
    graph.get_mut("c").expect("c").insert("a".into());
    let cycle = find_cycle(&graph).expect("a -> b -> c -> a");
    assert_eq!(cycle.first(), cycle.last());
    assert_eq!(cycle.len(), 4, "{cycle:?}");
}

#[test]
fn only_the_unit_test_module_is_left_out() {
    let source = "use a;\n#[cfg(test)]\nfn helper() {}\n#[cfg(test)]\n#[allow(x)]\nmod tests {}";
    let at = unit_tests_at(source);
    assert!(source[..at].contains("fn helper"));
    assert!(source[at..].starts_with("#[cfg(test)]\n#[allow(x)]\nmod tests"));
    assert_eq!(unit_tests_at("use a;"), "use a;".len());
}

#[test]
fn the_parser_reads_groups_macros_and_skips_comments() {
    let code = code_only(
        "use crate::{alpha::X, beta, gamma::{Y, Z}};\n\
         // use crate::hidden;\n/* crate::blocked */ let v = $crate::delta::f(); mycrate::no;",
    );
    assert_eq!(crate_names(&code), ["alpha", "beta", "gamma", "delta"]);
}

#[test]
fn top_level_modules_form_no_cycle() {
    let graph = module_graph();
    if let Some(cycle) = find_cycle(&graph) {
        panic!(
            "import cycle between top-level modules: {}\nfull graph: {graph:#?}",
            cycle.join(" -> ")
        );
    }
}

#[test]
fn kernels_and_errors_depend_only_on_leaves() {
    let graph = module_graph();
    // The leaf modules: they import nothing from the crate but each other
    // and the error type.
    let leaves = [
        "alloc",
        "error",
        "fmt",
        "scaled",
        "serde_float",
        "vocabulary",
    ];
    for (module, allowed) in [
        ("linalg", &leaves[..]),
        ("error", &leaves[..]),
        ("vocabulary", &["fmt", "serde_float"][..]),
    ] {
        let deps = graph.get(module).expect("module exists");
        let extra: Vec<_> = deps
            .iter()
            .filter(|d| !allowed.contains(&d.as_str()))
            .collect();
        assert!(
            extra.is_empty(),
            "{module} imports {extra:?}; it may import only {allowed:?}"
        );
    }
}
