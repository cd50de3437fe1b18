//! `eis simulate` and `eis inspect` on the circuit library.

use eis_tests::{eis, read_canonical, root, scratch};

#[test]
fn placeholder_runs() {
    let dir = scratch("placeholder");
    let run = eis(&dir, &["inspect", "--model", "R0 + Rct|Qdl"]).expect_code(0);
    assert!(run.stdout.starts_with("R0 + Rct|Qdl"));
    let _ = (read_canonical, root);
}
