//! The `replay` command line.

fn main() {
    eprintln!("replay: no commands yet; see README.md");
    std::process::exit(2);
}
