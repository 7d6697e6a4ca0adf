//! The one integration-test binary of trapwise. Each module below is one family of tests;
//! keep this file a plain, commented list.

// Test code states tolerances as written (a * se + b), not as fused multiply-adds.
#![allow(clippy::suboptimal_flops)]

// The layering invariants (a pure numerical core) and the source conventions.
mod architecture;

// The `trapwise` binary offline: calibrate and simulate in every format, bad input with located
// messages and exit codes (pinned by snapshot).
mod cli;

// The README's table of run settings against the settings table (a snapshot of it).
mod docs;

// `trapwise simulate` with instrument terms (filter, drag, noise floor, 1/f drift, lines, camera
// exposure, fixed start): periodograms against the declared spectra, refused flags (pinned by
// snapshot), and the demo recordings reproduced byte for byte.
mod cli_simulate;

// Shared helpers: test databases on both backends, test servers on port 0, demo recordings
// made with `trapwise simulate`, and the offline CLI as the reference.
mod support;

// The store on SQLite and PostgreSQL: round trips, idempotency, lab scoping, tokens, paging.
mod store;

// The HTTP service end to end over a real socket, on both backends: uploads against the
// offline CLI's numbers, listing, history, raw downloads, bad inputs, tokens, restarts,
// operations endpoints, and the `upload` and `token` subcommands.
mod service;

// What one client can hold of the service, over raw sockets: header-read timeout, idle limit in
// multipart bodies, connections per client (directly and through a trusted proxy), refusals
// before the body, and a SIGTERM that ends the binary within the grace period.
mod connections;

// The API's contract on both backends: every error a problem document with its own status,
// settings out of range and bad names refused with the field, capped details, and the OpenAPI
// document describing what the service answers.
mod api_contract;

// Uploads of issue 15's formats end to end (a .npz with repeated dataset fields, a semicolon
// CSV with decimal commas, gzip), their damaged cases (400) and a compression bomb (413).
mod formats;

// The page in headless Chromium over WebDriver against the real service: uploads by drop and
// by file chooser, numbers equal to the API's, plots drawn, refused uploads' messages, the
// laser-safety caution in view, history and overview; screenshots in test-output/screenshots.
mod browser;
