//! Readers and writers for dense CSV, plain vectors and Matrix Market files.
