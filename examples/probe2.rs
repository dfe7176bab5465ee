use reweave::fill::*;
use reweave::mask::Mask;
use reweave::synth::*;
fn main() {
    let n = 512;
    for (a, b) in [(2usize, 509usize), (2, 510), (3, 509), (3, 510), (40, 470), (41, 471), (2, 300), (100, 509)] {
        let mask = Mask::from_fn(n, n, |x, y| x >= a && x <= b && y >= a && y <= b);
        let mut plane = smooth_plane(n, n, 3);
        let solver = Solver::new(&mask).unwrap();
        let p = FillParams::default();
        let r = solver.solve(&mut [&mut plane[..]], &p, Start::FullMultigrid, &mut |_| true).unwrap();
        let h = &r.channels[0].history;
        let f: Vec<String> = h.windows(2).map(|w| format!("{:.3}", w[1] / w[0])).collect();
        println!("[{a},{b}] cycles={} {}", r.channels[0].cycles, f.join(","));
    }
}
