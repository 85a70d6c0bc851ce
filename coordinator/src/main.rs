fn main() {
    eprintln!("cubehunt-coordinator: not built yet");
    std::process::exit(2);
}
