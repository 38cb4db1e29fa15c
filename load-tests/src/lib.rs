//! Load generator (issue 7): not built yet. This crate exists so the workspace has the layout of the contract.
