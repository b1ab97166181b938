//! Replays the committed fuzz corpus and every input that once crashed, so
//! CI guards against regressions without running the fuzzer.

use std::fs;
use std::path::Path;

fn replay(dir: &Path, f: fn(&[u8])) -> usize {
    let Ok(entries) = fs::read_dir(dir) else { return 0 };
    let mut n = 0;
    for entry in entries.flatten() {
        let bytes = fs::read(entry.path()).expect("read corpus file");
        f(&bytes);
        n += 1;
    }
    n
}

#[test]
fn decode_session_corpus() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz");
    let n = replay(&root.join("corpus/decode_session"), ipfix_core::harness::decode_session)
        + replay(&root.join("regressions/decode_session"), ipfix_core::harness::decode_session);
    assert!(n > 0, "corpus is empty");
}

#[test]
fn template_compile_corpus() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz");
    let n = replay(&root.join("corpus/template_compile"), ipfix_core::harness::template_compile)
        + replay(&root.join("regressions/template_compile"), ipfix_core::harness::template_compile);
    assert!(n > 0, "corpus is empty");
}

/// The decode-session corpus through the column builders too (the
/// converter's path); its own corpus adds what fuzzing that target found.
#[cfg(feature = "columnar")]
#[test]
fn decode_to_columns_corpus() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz");
    let n = replay(&root.join("corpus/decode_session"), ipfix_core::harness::decode_to_columns)
        + replay(&root.join("corpus/decode_to_columns"), ipfix_core::harness::decode_to_columns)
        + replay(&root.join("regressions/decode_to_columns"), ipfix_core::harness::decode_to_columns);
    assert!(n > 0, "corpus is empty");
}
