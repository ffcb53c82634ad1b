//! What the benchmark examples share: their one optional argument.

/// The first seed from `--first-seed N`, or `default` without arguments;
/// anything else ends the example with exit code 2 and what was expected,
/// what was found, under the example's `name`.
pub fn first_seed(name: &str, default: u64) -> u64 {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let parsed = match args.as_slice() {
        [] => Ok(default),
        [flag, n] if flag == "--first-seed" => n
            .parse()
            .map_err(|e| format!("expected --first-seed and a whole number, found {n:?}: {e}")),
        other => Err(format!(
            "expected nothing or --first-seed N, found {other:?}"
        )),
    };
    parsed.unwrap_or_else(|e| {
        eprintln!("{name}: {e}");
        std::process::exit(2);
    })
}
