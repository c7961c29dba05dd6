//! The integration tests that share one test binary: one link instead of
//! one per file keeps CI within its time budget. Timing-sensitive tests
//! (live streaming, back-pressure) keep binaries of their own, so heavy
//! tests here do not share the cores with them.

mod batch;
mod calibration;
mod capture_readers;
mod cli;
mod compressed_limit;
mod csv_round_trip;
mod end_to_end;
mod external_block;
mod front_end_surprises;
mod graph_validation;
mod graphs_and_regress;
mod hostile_bad_inputs;
mod hostile_fuzz_inputs;
mod hostile_properties;
mod inspect_captures;
mod live_session;
mod output_safety;
mod pictures;
mod pictures_against_runs;
mod pictures_circular;
mod plugin_block;
mod regress_reports;
mod report_page;
mod runtime;
mod schedule_check;
mod signal_timing;
mod synth_and_writers;
mod validation_phase;
