//! The layer rule (DEVELOPERS.md, "The house"): every source file under `src/` sits in one
//! layer folder, and its code (tests included) names only its own layer and the layers
//! below, always through the layer's path (`crate::stats::…`, never a root re-export such
//! as `crate::Term`, which would hide where the item lives). `src/lib.rs` is the front
//! door above every layer.

use std::fs;
use std::path::{Path, PathBuf};

/// The layers, bottom to top. A new folder under `src/` must be placed here.
const LAYERS: [&str; 10] = [
    "base", "stats", "model", "filter", "estimate", "fit", "forecast", "select", "store", "fleet",
];

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let mut entries: Vec<_> = fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("read {}: {e}", dir.display()))
        .map(|e| e.expect("directory entry").path())
        .collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// The code of a file without its comments (line comments and doc comments; the crate
/// writes no block comments), so that doc links to higher layers do not count.
fn code_only(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for line in text.lines() {
        let mut in_string = false;
        let mut prev = '\0';
        let mut cut = line.len();
        for (i, c) in line.char_indices() {
            if c == '"' && prev != '\\' {
                in_string = !in_string;
            }
            if !in_string && c == '/' && prev == '/' {
                cut = i - 1;
                break;
            }
            prev = c;
        }
        out.push_str(&line[..cut]);
        out.push('\n');
    }
    out
}

/// Every `crate::<name>` in `code`, with its line number.
fn crate_references(code: &str) -> Vec<(usize, String)> {
    let mut found = Vec::new();
    for (n, line) in code.lines().enumerate() {
        let mut rest = line;
        while let Some(at) = rest.find("crate::") {
            let before = rest[..at].chars().next_back();
            let tail = &rest[at + "crate::".len()..];
            // `$crate::` in macros and identifiers ending in "crate" are not paths.
            if !before.is_some_and(|c| c.is_alphanumeric() || c == '_' || c == '$') {
                let name: String = tail
                    .chars()
                    .take_while(|c| c.is_alphanumeric() || *c == '_' || *c == '{')
                    .collect();
                found.push((n + 1, name));
            }
            rest = tail;
        }
    }
    found
}

/// The violations of the rule in the tree under `src`.
fn violations(src: &Path) -> Vec<String> {
    let mut files = Vec::new();
    rust_files(src, &mut files);
    let mut bad = Vec::new();
    for file in files {
        let rel = file.strip_prefix(src).expect("under src");
        if rel == Path::new("lib.rs") {
            continue;
        }
        let folder = rel
            .components()
            .next()
            .and_then(|c| c.as_os_str().to_str())
            .unwrap_or("");
        let Some(own) = LAYERS.iter().position(|l| *l == folder) else {
            bad.push(format!(
                "src/{}: not in a layer folder (place it in one of {LAYERS:?}, or add its folder to LAYERS in tests/layers.rs and the layer map in DEVELOPERS.md)",
                rel.display()
            ));
            continue;
        };
        let text = fs::read_to_string(&file).expect("readable source");
        for (line, name) in crate_references(&code_only(&text)) {
            match LAYERS.iter().position(|l| *l == name) {
                Some(used) if used > own => bad.push(format!(
                    "src/{}:{line}: layer `{}` uses the higher layer `{name}`",
                    rel.display(),
                    LAYERS[own]
                )),
                Some(_) => {}
                None => bad.push(format!(
                    "src/{}:{line}: `crate::{name}` does not name a layer; use the item's layer path",
                    rel.display()
                )),
            }
        }
    }
    bad
}

#[test]
fn no_file_uses_a_higher_layer() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let bad = violations(&src);
    assert!(bad.is_empty(), "layer rule broken:\n{}", bad.join("\n"));
}

/// The checker itself: a made-up tree with one upward use, one root re-export, one file
/// outside the layers, a doc link and a string that must not count.
#[test]
fn the_checker_finds_upward_uses() {
    let root = std::env::temp_dir().join(format!("lagwise-layers-{}", std::process::id()));
    let _ = fs::remove_dir_all(&root);
    for dir in ["base", "fit", "misc"] {
        fs::create_dir_all(root.join(dir)).unwrap();
    }
    fs::write(root.join("lib.rs"), "use crate::fleet::Fleet;\n").unwrap();
    fs::write(
        root.join("base/a.rs"),
        "/// See [`crate::fit::x`].\nuse crate::base::b; // crate::select\nuse crate::fit::Fitted;\nlet s = \"crate::fleet\";\n",
    )
    .unwrap();
    fs::write(
        root.join("fit/b.rs"),
        "use crate::Term;\nuse crate::stats::c;\n",
    )
    .unwrap();
    fs::write(root.join("misc/c.rs"), "fn f() {}\n").unwrap();
    let bad = violations(&root);
    let _ = fs::remove_dir_all(&root);
    assert_eq!(bad.len(), 4, "{bad:#?}");
    assert!(bad[0].contains("base/a.rs:3: layer `base` uses the higher layer `fit`"));
    // The string literal is code to this checker: it is reported, which errs on the safe side.
    assert!(bad[1].contains("base/a.rs:4"));
    assert!(bad[2].contains("fit/b.rs:1: `crate::Term` does not name a layer"));
    assert!(bad[3].contains("misc/c.rs: not in a layer folder"));
}
