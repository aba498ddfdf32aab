//! End-to-end tests: the `facetcal` binary run in scratch folders. One test binary, one module
//! per command (see DEVELOPERS.md).

mod util;
// The headless-browser loader the report crate's own browser test uses.
#[path = "../crates/report/tests/headless/mod.rs"]
mod headless;
// The crafted bad image files the imageio crate's own tests use.
#[path = "../crates/imageio/tests/crafted/mod.rs"]
mod crafted;

mod bad_input;
mod calibrate;
mod code_shape;
mod detect;
mod fleet;
mod hostile;
mod regress;
mod render;
mod solve;
mod target;
mod undistort;
mod watch;
