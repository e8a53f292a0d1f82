//! Integration tests: kinematics.
