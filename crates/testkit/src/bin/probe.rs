//! `fieldcage-probe`: answers one JSON request on standard input with the
//! analysis functions, for the reference tests in Python
//! (`tests/python/test_analysis_reference.py`; the requests are documented in
//! `fieldcage_testkit::probe`).

use anyhow::Context;

fn main() -> anyhow::Result<()> {
    let mut input = String::new();
    std::io::Read::read_to_string(&mut std::io::stdin(), &mut input)
        .context("reading the request on standard input")?;
    println!("{}", fieldcage_testkit::probe::run(&input)?);
    Ok(())
}
