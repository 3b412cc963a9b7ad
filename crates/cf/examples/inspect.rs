//! Prints what the reader makes of a file.
use shearbox_cf::{Dataset, VarOverrides};
fn main() {
    for a in std::env::args().skip(1) {
        match Dataset::open(std::path::Path::new(&a), &VarOverrides::default()) {
            Ok(ds) => {
                println!(
                    "{a}: {} lat {:?}.. lon {:?} periodic {} levels {:?} times {:?} cal {}",
                    ds.format(),
                    &ds.grid().lat()[..2],
                    ds.grid().lon(),
                    ds.grid().is_periodic(),
                    ds.levels().pa(),
                    ds.times(),
                    ds.calendar()
                );
                for r in ds.recognised() {
                    println!("   {r:?}");
                }
                match ds.read_fields(0, None) {
                    Ok(f) => println!(
                        "   read ok z={:?} t={:?}",
                        f.geopotential_height().map(|z| z[[0, 0, 0]]),
                        f.temperature().map(|z| z[[0, 0, 0]])
                    ),
                    Err(e) => println!("   read ERR {e}"),
                }
            }
            Err(e) => println!("{a}: ERR {e}"),
        }
    }
}
