//! The crate's layers, checked from its source: every top-level module may use only modules of its
//! own layer or below (the table below), the top-level modules form no cycle, JSON is made only in
//! the render layer (and by the simulator, for the demo plates' truth files), and the binary reaches the library only through `config` and `commands`.
//! Test code (`tests.rs` files and `#[cfg(test)]` modules) is left out: tests may reach anywhere.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// The layers, bottom first. A module may use modules of a lower layer, or of its own layer when no
/// cycle results.
const LAYERS: &[(&str, usize)] = &[
    ("core", 0),
    ("config", 1),
    ("files", 2),
    ("import", 3),
    ("layout", 3),
    ("signal", 4),
    ("rates", 5),
    ("fit", 6),
    ("groups", 7),
    // Screening plates: % activity, plate quality, a dose-response curve per compound.
    ("screen", 7),
    ("progress", 8),
    ("pipeline", 9),
    // A campaign of plates: digests of pipeline results, Z', cross-plate fits.
    ("campaign", 9),
    ("render", 10),
    ("commands", 11),
    // The simulator serves the demo data, tests and benchmarks, never a run: it sits on top.
    ("simulate", 12),
];

fn layer_of(module: &str) -> Option<usize> {
    LAYERS
        .iter()
        .find(|(name, _)| *name == module)
        .map(|(_, layer)| *layer)
}

fn source_files(folder: &Path, found: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(folder).unwrap().flatten() {
        let path = entry.path();
        if path.is_dir() {
            source_files(&path, found);
        } else if path.extension().is_some_and(|e| e == "rs") {
            found.push(path);
        }
    }
}

/// The file's text without comments and without its test module.
fn code_of(text: &str) -> String {
    let mut code = String::new();
    for line in text.lines() {
        let trimmed = line.trim_start();
        if trimmed.starts_with("#[cfg(test)]") {
            break;
        }
        if trimmed.starts_with("//") {
            continue;
        }
        code.push_str(line.split(" //").next().unwrap_or(line));
        code.push('\n');
    }
    code
}

/// The top-level modules a piece of code names through `crate::` (including `use crate::{a, b::c}`).
fn modules_used(code: &str) -> BTreeSet<String> {
    let mut used = BTreeSet::new();
    let mut rest = code;
    while let Some(at) = rest.find("crate::") {
        let after = &rest[at + "crate::".len()..];
        if let Some(group) = after.strip_prefix('{') {
            let end = group.find("};").unwrap_or(group.len());
            let mut depth = 0usize;
            let mut item = String::new();
            for c in group[..end].chars() {
                match c {
                    '{' => depth += 1,
                    '}' => depth = depth.saturating_sub(1),
                    ',' if depth == 0 => {
                        if let Some(name) = item.trim().split("::").next() {
                            used.insert(name.trim().to_string());
                        }
                        item.clear();
                        continue;
                    }
                    _ => {}
                }
                item.push(c);
            }
            if let Some(name) = item.trim().split("::").next() {
                used.insert(name.trim().to_string());
            }
        } else {
            let name: String = after
                .chars()
                .take_while(|c| c.is_alphanumeric() || *c == '_')
                .collect();
            used.insert(name);
        }
        rest = after;
    }
    used.retain(|name| !name.is_empty());
    used
}

struct Crate {
    /// Top-level module -> modules it uses (outside tests).
    edges: BTreeMap<String, BTreeSet<String>>,
    /// Top-level module -> files of it whose code names serde_json.
    json_users: BTreeMap<String, Vec<String>>,
}

fn read_crate() -> Crate {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    source_files(&src, &mut files);
    let mut edges: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    let mut json_users: BTreeMap<String, Vec<String>> = BTreeMap::new();
    for file in files {
        let relative = file.strip_prefix(&src).unwrap();
        if relative.file_name().is_some_and(|name| name == "tests.rs") {
            continue;
        }
        let top = relative
            .components()
            .next()
            .unwrap()
            .as_os_str()
            .to_string_lossy()
            .trim_end_matches(".rs")
            .to_string();
        let code = code_of(&std::fs::read_to_string(&file).unwrap());
        let used = modules_used(&code);
        edges
            .entry(top.clone())
            .or_default()
            .extend(used.into_iter().filter(|m| *m != top));
        if code.contains("serde_json") {
            json_users
                .entry(top)
                .or_default()
                .push(relative.display().to_string());
        }
    }
    Crate { edges, json_users }
}

#[test]
fn every_module_has_a_layer_and_uses_only_its_own_or_lower_ones() {
    let krate = read_crate();
    let mut problems = Vec::new();
    for (module, used) in &krate.edges {
        if ["lib", "main", "cli"].contains(&module.as_str()) {
            continue;
        }
        let Some(layer) = layer_of(module) else {
            problems.push(format!("{module} has no layer in the table"));
            continue;
        };
        for other in used {
            match layer_of(other) {
                None => problems.push(format!("{module} uses {other}, which has no layer")),
                Some(other_layer) if other_layer > layer => problems.push(format!(
                    "{module} (layer {layer}) uses {other} (layer {other_layer}), a layer above it"
                )),
                Some(_) => {}
            }
        }
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

#[test]
fn top_level_modules_form_no_cycle() {
    let krate = read_crate();
    // Depth-first search for a back edge.
    fn visit(
        module: &str,
        edges: &BTreeMap<String, BTreeSet<String>>,
        state: &mut BTreeMap<String, u8>,
        path: &mut Vec<String>,
    ) -> Option<Vec<String>> {
        state.insert(module.to_string(), 1);
        path.push(module.to_string());
        for next in edges.get(module).into_iter().flatten() {
            match state.get(next.as_str()).copied().unwrap_or(0) {
                1 => {
                    let start = path.iter().position(|m| m == next).unwrap_or(0);
                    let mut cycle = path[start..].to_vec();
                    cycle.push(next.clone());
                    return Some(cycle);
                }
                0 => {
                    if let Some(cycle) = visit(next, edges, state, path) {
                        return Some(cycle);
                    }
                }
                _ => {}
            }
        }
        path.pop();
        state.insert(module.to_string(), 2);
        None
    }
    let mut state = BTreeMap::new();
    for module in krate.edges.keys() {
        if state.get(module.as_str()).copied().unwrap_or(0) == 0 {
            if let Some(cycle) = visit(module, &krate.edges, &mut state, &mut Vec::new()) {
                panic!("top-level modules in a cycle: {}", cycle.join(" -> "));
            }
        }
    }
}

#[test]
fn json_is_made_only_in_the_render_layer() {
    let krate = read_crate();
    let outside: Vec<String> = krate
        .json_users
        .iter()
        // The simulator writes the demo plates' truth files; it is no part of a run.
        .filter(|(module, _)| !["render", "simulate"].contains(&module.as_str()))
        .flat_map(|(_, files)| files.clone())
        .collect();
    assert!(outside.is_empty(), "serde_json outside render/: {outside:?}");
}

#[test]
fn the_binary_reaches_the_library_through_config_and_commands_only() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    for file in ["main.rs", "cli.rs"] {
        let code = code_of(&std::fs::read_to_string(src.join(file)).unwrap());
        let mut rest = code.as_str();
        while let Some(at) = rest.find("platekin::") {
            let after = &rest[at + "platekin::".len()..];
            let module: String = after
                .chars()
                .take_while(|c| c.is_alphanumeric() || *c == '_')
                .collect();
            assert!(
                module == "config" || module == "commands",
                "{file} reaches platekin::{module}"
            );
            rest = after;
        }
    }
}

/// The checker itself: a use of a higher layer and a cycle are found in code written for the test.
#[test]
fn the_checker_finds_what_it_looks_for() {
    let code = code_of(
        "use crate::core::stats;\nuse crate::{render::json, fit::models::X};\n// crate::commands in a comment\nfn f() { crate::pipeline::run(); }\n#[cfg(test)]\nmod tests { use crate::simulate; }\n",
    );
    let used = modules_used(&code);
    assert_eq!(
        used.into_iter().collect::<Vec<_>>(),
        ["core", "fit", "pipeline", "render"]
    );
    assert!(layer_of("render") > layer_of("rates"));
}
