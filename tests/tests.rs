//! End-to-end tests: the `facetcal` binary run in scratch folders. One test binary, one module
//! per command (see DEVELOPERS.md).

mod util;

mod bad_input;
mod calibrate;
mod detect;
mod fleet;
mod regress;
mod render;
mod solve;
mod target;
mod undistort;
mod watch;
