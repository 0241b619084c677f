//! Accuracy of the prism kernels against distance: the closed form of Nagy et al. and
//! Gauss–Legendre point-mass rules of several orders, each against a 12-point-per-axis rule (its own
//! error falls as (s/2D)^24: below 1e-14 from D = 1.5 s). Prints a Markdown table for
//! docs/methods/forward.md.

use gravgrad_forward::prism::Prism;

/// Largest relative error over the six tensor components, relative to the largest component.
fn rel_err(a: [f64; 6], b: [f64; 6]) -> f64 {
    let scale = b.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max)
        / scale
}

pub fn run() {
    // Prisms of several shapes (longest side 100 m), each observed along 7 directions at distance D
    // from its centre; the worst relative error over shapes, directions and components is printed.
    let shapes = [
        Prism::new([-50.0, 50.0], [-30.0, 30.0], [-20.0, 20.0], 2670.0),
        Prism::new([-50.0, 50.0], [-50.0, 50.0], [-50.0, 50.0], 2670.0),
        Prism::new([-50.0, 50.0], [-50.0, 50.0], [-5.0, 5.0], 2670.0),
        Prism::new([-50.0, 50.0], [-10.0, 10.0], [-10.0, 10.0], 2670.0),
    ];
    let dirs: Vec<[f64; 3]> = [
        [1.0f64, 0.0, 0.0],
        [0.0, 1.0, 0.0],
        [0.0, 0.0, -1.0],
        [0.48, 0.6, -0.64],
        [1.0, 1.0, 0.0],
        [1.0, -1.0, 1.0],
        [0.2, 0.1, 0.97],
    ]
    .iter()
    .map(|d| {
        let n = (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt();
        [d[0] / n, d[1] / n, d[2] / n]
    })
    .collect();
    println!(
        "| D / longest side | closed form | GL 2³ | GL 3³ | GL 4³ | GL 6³ | switched (`Prism::tensor`) |"
    );
    println!("|---|---|---|---|---|---|---|");
    for ratio in [
        1.5, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0, 50.0, 100.0, 300.0, 1000.0, 3000.0,
        10000.0,
    ] {
        let d = ratio * 100.0;
        let mut worst = [0.0f64; 6];
        for p in &shapes {
            for dir in &dirs {
                let obs = [dir[0] * d, dir[1] * d, dir[2] * d];
                let reference = p.field_gauss(obs, 12).tensor.to_array();
                let got = [
                    p.field_closed(obs).tensor.to_array(),
                    p.field_gauss(obs, 2).tensor.to_array(),
                    p.field_gauss(obs, 3).tensor.to_array(),
                    p.field_gauss(obs, 4).tensor.to_array(),
                    p.field_gauss(obs, 6).tensor.to_array(),
                    p.tensor(obs).to_array(),
                ];
                for (w, t) in worst.iter_mut().zip(got) {
                    *w = w.max(rel_err(t, reference));
                }
            }
        }
        let cells: Vec<String> = worst.iter().map(|e| format!("{e:.1e}")).collect();
        println!("| {ratio} | {} |", cells.join(" | "));
    }
}
