//! The import graph of a crate's top-level modules, read from its sources, and its circles: a
//! module `a` imports `b` when a file under `a` names `crate::b`. The crates keep this graph
//! free of circles (ARCHITECTURE.md), and their unit tests check it with [`circles`].

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// `module → modules it imports` for the crate whose `src` folder is `src`.
pub fn imports(src: &Path) -> BTreeMap<String, BTreeSet<String>> {
    let mut graph: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    let mut files = Vec::new();
    collect(src, &mut files);
    for file in files {
        let rel = file.strip_prefix(src).expect("under src");
        let first = rel.components().next().expect("a path");
        let module = first
            .as_os_str()
            .to_string_lossy()
            .trim_end_matches(".rs")
            .to_string();
        if module == "lib" || module == "main" {
            continue;
        }
        let text = std::fs::read_to_string(&file).expect("a readable source file");
        let named = graph.entry(module.clone()).or_default();
        for (at, _) in text.match_indices("crate::") {
            let rest = &text[at + "crate::".len()..];
            let name: String = rest
                .chars()
                .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
                .collect();
            // `test_plants` and the like are test-only; a `{` opens a group of paths.
            if !name.is_empty() && name != module && !name.starts_with("test") {
                named.insert(name);
            }
        }
    }
    graph
}

fn collect(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in std::fs::read_dir(dir).expect("a readable folder") {
        let path = entry.expect("an entry").path();
        if path.is_dir() {
            collect(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// Every set of two or more modules that import one another in a circle (the strongly
/// connected components of the graph, by Tarjan's algorithm).
pub fn circles(graph: &BTreeMap<String, BTreeSet<String>>) -> Vec<Vec<String>> {
    struct Walk<'a> {
        graph: &'a BTreeMap<String, BTreeSet<String>>,
        index: BTreeMap<&'a str, usize>,
        low: BTreeMap<&'a str, usize>,
        stack: Vec<&'a str>,
        found: Vec<Vec<String>>,
    }
    impl<'a> Walk<'a> {
        fn visit(&mut self, v: &'a str) {
            let i = self.index.len();
            self.index.insert(v, i);
            self.low.insert(v, i);
            self.stack.push(v);
            for w in self.graph.get(v).into_iter().flatten() {
                let w = w.as_str();
                if !self.index.contains_key(w) {
                    self.visit(w);
                    let lw = self.low[w];
                    let lv = self.low.get_mut(v).expect("visited");
                    *lv = (*lv).min(lw);
                } else if self.stack.contains(&w) {
                    let iw = self.index[w];
                    let lv = self.low.get_mut(v).expect("visited");
                    *lv = (*lv).min(iw);
                }
            }
            if self.low[v] == self.index[v] {
                let mut group = Vec::new();
                while let Some(w) = self.stack.pop() {
                    group.push(w.to_string());
                    if w == v {
                        break;
                    }
                }
                if group.len() > 1 {
                    group.sort();
                    self.found.push(group);
                }
            }
        }
    }
    let mut walk = Walk {
        graph,
        index: BTreeMap::new(),
        low: BTreeMap::new(),
        stack: Vec::new(),
        found: Vec::new(),
    };
    for v in graph.keys() {
        if !walk.index.contains_key(v.as_str()) {
            walk.visit(v);
        }
    }
    walk.found
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_circle_is_found_and_a_chain_is_not() {
        let g = |edges: &[(&str, &str)]| {
            let mut graph: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
            for (a, b) in edges {
                graph
                    .entry(a.to_string())
                    .or_default()
                    .insert(b.to_string());
                graph.entry(b.to_string()).or_default();
            }
            graph
        };
        assert!(circles(&g(&[("api", "service"), ("service", "store")])).is_empty());
        assert_eq!(
            circles(&g(&[("a", "b"), ("b", "c"), ("c", "a"), ("c", "d")])),
            [["a", "b", "c"]]
        );
    }
}
