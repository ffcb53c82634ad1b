//! The command line lives in the binary (`src/main.rs`, `src/cli/`): no
//! library source may mention clap, so the library's functions take plain
//! option structs whatever front end calls them.

use std::path::{Path, PathBuf};

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

#[test]
fn no_library_source_uses_clap() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let binary = [src.join("main.rs")];
    let library: Vec<_> = files
        .iter()
        .filter(|p| !binary.contains(p) && !p.starts_with(src.join("cli")))
        .collect();
    assert!(
        library.iter().any(|p| p.ends_with("service.rs")),
        "the walk found the library's files"
    );
    let offenders: Vec<String> = library
        .iter()
        .filter(|p| std::fs::read_to_string(p).unwrap().contains("clap"))
        .map(|p| p.display().to_string())
        .collect();
    assert!(
        offenders.is_empty(),
        "clap used in the library: {offenders:?}"
    );
    // The binary side does use it: the check looks where clap is.
    assert!(std::fs::read_to_string(src.join("cli/mod.rs"))
        .unwrap()
        .contains("clap"));
}
