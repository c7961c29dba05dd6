#![no_main]
//! Fuzz target: see `lobeflow::fuzzing::wav_reader`.

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let _ = lobeflow::fuzzing::wav_reader(data);
});
