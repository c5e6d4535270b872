//! Arbitrary text into the point-file parser: it must never panic, and
//! whatever it accepts must already be a valid point (`parse` validates),
//! which a pipeline then accepts or refuses with a typed error.
#![no_main]

use dsp_core::pipeline::Pipeline;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = core::str::from_utf8(data) else {
        return;
    };
    if let Ok(point) = host_sim::point::parse(text) {
        assert!(point.validate().is_ok(), "parse accepted an invalid point");
        // Typed error or a pipeline; never a panic.
        let _ = Pipeline::<1024, 512, 2048>::new(&point);
    }
});
