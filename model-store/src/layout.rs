//! Object keys of the store layout (see the crate docs).

use object_store::path::Path;

pub fn models(root: &Path) -> Path {
    root.child("models")
}

pub fn model(root: &Path, name: &str) -> Path {
    models(root).child(name)
}

pub fn versions(root: &Path, name: &str) -> Path {
    model(root, name).child("versions")
}

pub fn version(root: &Path, name: &str, version: &str) -> Path {
    versions(root, name).child(version)
}

pub fn manifest(root: &Path, name: &str, version_id: &str) -> Path {
    version(root, name, version_id).child("manifest.json")
}

pub fn payload(root: &Path, name: &str, version_id: &str, file: &str) -> Path {
    version(root, name, version_id).child(file)
}

pub fn alias(root: &Path, name: &str, alias: &str) -> Path {
    model(root, name)
        .child("aliases")
        .child(format!("{alias}.json"))
}
