//! Model store (issue 4): not built yet. This crate exists so the workspace has the layout of the contract.
