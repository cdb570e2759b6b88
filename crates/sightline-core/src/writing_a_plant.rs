//! # Writing a plant
//! (placeholder)
