fn main() {
    eprintln!("cubehunt-worker: not built yet");
    std::process::exit(2);
}
