#![no_main]
//! Fuzz target: see `lobeflow::fuzzing::graph_load`.

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let _ = lobeflow::fuzzing::graph_load(data);
});
