//! The `fitaudit` command line (being assembled).

fn main() {
    eprintln!("fitaudit: command line not assembled yet");
    std::process::exit(1);
}
