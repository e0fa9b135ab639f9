//! Tests of the tactile map.
