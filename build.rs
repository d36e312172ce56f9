// Embeds every `profiles/*.toml` in the binary, so an installed restvolt works
// anywhere. Adding a profile is adding a file: no list to keep by hand.
use std::{env, fs, path::Path};

fn main() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("profiles");
    println!("cargo:rerun-if-changed={}", dir.display());
    let mut files: Vec<_> = fs::read_dir(&dir)
        .map(|rd| {
            rd.filter_map(Result::ok)
                .map(|e| e.path())
                .filter(|p| p.extension().is_some_and(|x| x == "toml"))
                .collect()
        })
        .unwrap_or_default();
    files.sort();
    let mut out = String::from("/// Built-in profiles: (file name, TOML text).\npub static EMBEDDED: &[(&str, &str)] = &[\n");
    for f in &files {
        println!("cargo:rerun-if-changed={}", f.display());
        let name = f
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        out.push_str(&format!(
            "    ({name:?}, include_str!({:?})),\n",
            f.display().to_string()
        ));
    }
    out.push_str("];\n");
    let dest =
        Path::new(&env::var("OUT_DIR").unwrap_or_else(|_| ".".into())).join("embedded_profiles.rs");
    if let Err(e) = fs::write(&dest, out) {
        panic!("cannot write {}: {e}", dest.display());
    }
}
