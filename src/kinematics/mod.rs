//! Placeholder; filled by the kinematics work.
