//! Writes the demo's sample inputs into `sample-inputs/`.
//!
//! INVENTED DATA, for the demo only: a made-up back-garden greenhouse whose
//! battery-powered monitor logs air temperature, relative humidity, soil
//! moisture and light every 5 minutes for 6 weeks of spring. Nothing here was
//! measured; the curves are simple daily cycles, weather spells, watering
//! events and noise from a seeded generator, so the file is the same on every
//! machine. Run: `cargo run --example make_sample_inputs`.

use std::fmt::Write as _;
use std::fs;

use vqforge::rng::SeededRng;

const STEP_MINUTES: i64 = 5;
const DAYS: i64 = 42;

fn main() -> std::io::Result<()> {
    let mut rng = SeededRng::new(20260315);
    let rows = DAYS * 24 * 60 / STEP_MINUTES;
    let mut csv = String::from("time,air_temp_c,humidity_pct,soil_moisture_pct,light_lux\n");

    // A weather spell every few days: a cloudy factor and a temperature offset.
    let spells: Vec<(f64, f64)> = (0..DAYS / 3 + 1)
        .map(|_| (0.35 + 0.65 * rng.unit_f64(), 3.0 * rng.normal()))
        .collect();
    let mut soil = 38.0f64;
    let mut humidity_noise = 0.0f64;
    for i in 0..rows {
        let minutes = i * STEP_MINUTES;
        let day = minutes / (24 * 60);
        let hour = (minutes % (24 * 60)) as f64 / 60.0;
        let (sun_factor, temp_offset) = spells[(day / 3) as usize];
        // Daylight from about 06:00 to 20:00, lengthening slowly through spring.
        let day_len = 13.0 + 1.5 * day as f64 / DAYS as f64;
        let sunrise = 13.0 - day_len / 2.0;
        let sun = ((hour - sunrise) / day_len * std::f64::consts::PI)
            .sin()
            .max(0.0);
        let light = (sun * 42_000.0 * sun_factor * (1.0 + 0.08 * rng.normal())).max(0.0);
        let mut air = 11.0 + temp_offset + 14.0 * sun * sun_factor + 0.3 * rng.normal();
        // Invented fault: on day 23 the heater trips for 25 minutes at night.
        if day == 23 && (2.0..2.42).contains(&hour) {
            air -= 6.5;
        }
        humidity_noise = 0.9 * humidity_noise + 0.6 * rng.normal();
        let humidity = (92.0 - 2.1 * (air - 10.0) + humidity_noise).clamp(25.0, 100.0);
        // Soil dries faster in warm light; watered at 07:00 every second day.
        soil -= 0.004 + 0.0009 * (air - 10.0).max(0.0) + 0.00000015 * light;
        if day % 2 == 0 && minutes % (24 * 60) == 7 * 60 {
            soil = (soil + 14.0 + 2.0 * rng.normal()).min(48.0);
        }
        let soil_reading = soil + 0.15 * rng.normal();
        let (y, mo, d) = (2026, 3 + (day + 14) / 31, 1 + (day + 14) % 31);
        let (hh, mm) = (minutes % (24 * 60) / 60, minutes % 60);
        writeln!(
            csv,
            "{y:04}-{mo:02}-{d:02}T{hh:02}:{mm:02},{air:.2},{humidity:.1},{soil_reading:.2},{light:.0}"
        )
        .expect("writing to a string");
    }
    fs::create_dir_all("sample-inputs")?;
    fs::write("sample-inputs/greenhouse.csv", csv)?;
    println!("wrote sample-inputs/greenhouse.csv ({rows} rows)");
    Ok(())
}
