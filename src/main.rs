fn main() {
    println!("hopmap");
}
