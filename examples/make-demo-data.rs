//! Writes the invented demo data of demo-data/ with a fixed seed (DESIGN.md §5 scenarios).
//!
//! Run: `cargo run --example make-demo-data`. The output is byte-identical on every run and platform
//! (ChaCha8 stream, libm transcendental functions, fixed number formatting).

use rand_chacha::ChaCha8Rng;
use rand_core::{RngCore, SeedableRng};
use std::fmt::Write as _;

struct Draw(ChaCha8Rng);

impl Draw {
    fn uniform(&mut self) -> f64 {
        // 53 random bits in [0, 1).
        (self.0.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        // Box–Muller (Box & Muller 1958).
        let u1 = 1.0 - self.uniform();
        let u2 = self.uniform();
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * std::f64::consts::PI * u2)
    }
    fn below(&mut self, n: u64) -> u64 {
        (self.uniform() * n as f64) as u64
    }
}

fn assessment(out_dir: &str) {
    let mut d = Draw(ChaCha8Rng::seed_from_u64(4172));
    let districts = ["harbour", "millbrook", "northgate", "uplands"];
    let district_effect = [0.0, -180.0, 140.0, 320.0];
    let n = 2400;
    let mut csv = String::from("parcel,price_per_m2,floor_area,building_age,transit_distance,storeys,district\n");
    let mut planted = String::from("parcel,line,kind,true_price_per_m2\n");
    for i in 0..n {
        let floor_area = 38.0 + 190.0 * libm::pow(d.uniform(), 1.3);
        let building_age = (d.uniform() * 95.0).round();
        let transit_distance = (60.0 + 2400.0 * d.uniform() * d.uniform()).round();
        let storeys = 1 + d.below(3);
        let district = d.below(4) as usize;
        // Smooth effects: price per m² falls with size then levels off; older stock is cheaper, except
        // for a band of sought-after period buildings around 70 years; transit proximity helps, but
        // the first 150 m or so (noise, crowds) are worth less.
        let g_area = 900.0 * libm::exp(-(floor_area - 38.0) / 45.0);
        let age_bump = (building_age - 70.0) / 14.0;
        let g_age = -9.0 * building_age + 300.0 * libm::exp(-age_bump * age_bump);
        let near = transit_distance / 150.0;
        let g_transit = -520.0 * (1.0 - libm::exp(-transit_distance / 700.0)) - 260.0 * libm::exp(-near * near);
        let mu = 3600.0 + g_area + g_age + g_transit + 95.0 * storeys as f64 + district_effect[district];
        let clean = mu + 160.0 * d.normal();
        let mut price = clean;
        let u = d.uniform();
        let parcel = format!("P-{}", 1001 + i);
        let line = i + 2;
        if u < 0.018 {
            price = clean * 10.0; // an extra zero typed into the price
            writeln!(planted, "{parcel},{line},extra-zero,{clean:.0}").unwrap();
        } else if u < 0.032 {
            price = clean * 0.5; // a family transfer at half value
            writeln!(planted, "{parcel},{line},family-transfer,{clean:.0}").unwrap();
        }
        // A few empty cells, as in real exports.
        let age_txt = if d.uniform() < 0.004 { String::new() } else { format!("{building_age:.0}") };
        writeln!(
            csv,
            "{parcel},{price:.0},{floor_area:.1},{age_txt},{transit_distance:.0},{storeys},{}",
            districts[district]
        )
        .unwrap();
    }
    std::fs::write(format!("{out_dir}/assessment-sales.csv"), csv).unwrap();
    std::fs::write(format!("{out_dir}/assessment-planted.csv"), planted).unwrap();
}

fn cold_store(out_dir: &str) {
    let mut d = Draw(ChaCha8Rng::seed_from_u64(73));
    let n = 730;
    let holidays = [0, 1, 97, 100, 121, 140, 358, 359, 365, 366, 462, 465, 486, 505, 723, 724];
    let mut csv = String::from("day,energy_kwh,outdoor_temp,pallets_moved,day_type\n");
    let mut planted = String::from("day,line,kind,true_energy_kwh\n");
    for i in 0..n {
        let season = libm::sin(2.0 * std::f64::consts::PI * (i as f64 - 105.0) / 365.25);
        let outdoor_temp = 10.5 + 11.0 * season + 3.2 * d.normal();
        let weekday = i % 7;
        let day_type = if holidays.contains(&i) {
            "holiday"
        } else if weekday >= 5 {
            "weekend"
        } else {
            "weekday"
        };
        let pallets = match day_type {
            "weekday" => 420.0 + 160.0 * d.uniform(),
            "weekend" => 120.0 + 90.0 * d.uniform(),
            _ => 40.0 * d.uniform(),
        }
        .round();
        // Refrigeration load rises steeply above about 12 °C; door openings add load that saturates.
        let g_temp = 95.0 * libm::log(1.0 + libm::exp((outdoor_temp - 12.0) / 4.0)) * 4.0 - 260.0;
        let g_pallets = 1400.0 * (1.0 - libm::exp(-pallets / 300.0));
        let type_effect = match day_type {
            "weekday" => 0.0,
            "weekend" => -210.0,
            _ => -340.0,
        };
        let clean = 5200.0 + g_temp + g_pallets + type_effect + 90.0 * d.normal();
        let mut kwh = clean;
        let line = i + 2;
        let u = d.uniform();
        if u < 0.02 {
            kwh = clean * 0.15; // meter dropped out for most of the day
            writeln!(planted, "{},{line},meter-dropout,{clean:.1}", i + 1).unwrap();
        } else if u < 0.03 {
            kwh = clean + 2600.0 + 400.0 * d.normal(); // double-counted meter reading
            writeln!(planted, "{},{line},double-count,{clean:.1}", i + 1).unwrap();
        }
        writeln!(csv, "{},{kwh:.1},{outdoor_temp:.1},{pallets:.0},{day_type}", i + 1).unwrap();
    }
    std::fs::write(format!("{out_dir}/cold-store-energy.csv"), csv).unwrap();
    std::fs::write(format!("{out_dir}/cold-store-planted.csv"), planted).unwrap();
}

fn main() {
    let out_dir =
        std::env::args().nth(1).unwrap_or_else(|| concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data").to_string());
    std::fs::create_dir_all(&out_dir).unwrap();
    assessment(&out_dir);
    cold_store(&out_dir);
    println!("wrote demo data into {out_dir}");
}
