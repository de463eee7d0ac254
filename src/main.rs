fn main() {
    println!("baroc {}", env!("CARGO_PKG_VERSION"));
}
