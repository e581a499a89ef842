//! Dense linear algebra behind one seam (faer by default, OpenBLAS with feature `openblas`).
