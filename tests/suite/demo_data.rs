//! Tests of the demo scenario's data (to be written).
