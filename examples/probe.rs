use reweave::fill::*;
use reweave::synth::*;
fn main() {
    let n: usize = std::env::args().nth(1).map(|s| s.parse().unwrap()).unwrap_or(512);
    for fam in MaskFamily::ALL {
        let mask = fam.mask(n, 7);
        let mut plane = smooth_plane(n, n, 3);
        let t = std::time::Instant::now();
        let solver = Solver::new(&mask).unwrap();
        let setup = t.elapsed().as_secs_f64();
        let mut p = FillParams::default();
        if let Ok(c) = std::env::var("CYC") { p.cycle = match c.as_str() { "W" => Cycle::W, "F" => Cycle::F, _ => Cycle::V }; }
        if let Ok(c) = std::env::var("NU") { let v: Vec<usize> = c.split(',').map(|x| x.parse().unwrap()).collect(); p.pre_smooth = v[0]; p.post_smooth = v[1]; }
        if let Ok(f) = std::env::var("FAM") { if f != fam.name() { continue; } }
        let r = solver.solve(&mut [&mut plane[..]], &p, Start::FullMultigrid, &mut |_| true);
        match r {
            Ok(r) => {
                let h = &r.channels[0].history;
                let f: Vec<String> = h.windows(2).map(|w| format!("{:.3}", w[1]/w[0])).collect();
                println!("{:10} n={} unk={} levels={:?} setup={:.3}s solve={:.3}s cycles={} res={:.2e} factors={}", fam.name(), n, r.unknowns, solver.hierarchy().unwrap().level_sizes(), setup, r.solve_seconds, r.channels[0].cycles, r.channels[0].relative_residual, f.join(","));
            }
            Err(e) => println!("{:10} ERR {e}", fam.name()),
        }
    }
}
