//! Landmark-set experiment (being written).
