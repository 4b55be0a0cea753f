//! Writes the demo's sample inputs into `sample-inputs/`.
//!
//! INVENTED DATA, for the demo only, all from one made-up scenario:
//!
//! * `greenhouse.csv`: a made-up back-garden greenhouse whose battery-powered
//!   monitor logs air temperature, relative humidity, soil moisture and light
//!   every 5 minutes for 6 weeks of spring. Nothing here was measured; the
//!   curves are simple daily cycles, weather spells, watering events and
//!   noise from a seeded generator.
//! * `splash.png`: the 240 × 135 boot screen of a made-up hand-held reader for
//!   such garden sensors: a sky-to-soil gradient, a sun with a soft glow,
//!   rolling hills, a leaf logo, a title bar and a progress bar.
//! * `icons/*.png`: four 32 × 32 status icons for the same reader
//!   (thermometer, droplet, sun, battery) on transparent backgrounds.
//!
//! The pictures are drawn procedurally: every shape is an inside test,
//! sampled 4 × 4 (splash) or 8 × 8 (icons) times per pixel, so edges are
//! anti-aliased and icon edges are partly transparent. The few random
//! placements come from a seeded generator, so every file is the same on
//! every machine. Run: `cargo run --example make_sample_inputs`.

use std::error::Error;
use std::f32::consts::PI;
use std::fmt::Write as _;
use std::fs;

use vqforge::export::write_rgba_png;
use vqforge::rng::SeededRng;

const STEP_MINUTES: i64 = 5;
const DAYS: i64 = 42;

fn main() -> Result<(), Box<dyn Error>> {
    write_log()?;
    write_splash()?;
    write_icons()
}

/// The greenhouse log (unchanged since the first release: same bytes).
fn write_log() -> std::io::Result<()> {
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

/// An RGBA canvas (premultiplied, components 0..1) painted shape by shape,
/// each shape blended over what is already there.
struct Canvas {
    width: usize,
    height: usize,
    /// Samples per pixel along each axis.
    samples: usize,
    px: Vec<[f32; 4]>,
}

/// A colour `0xRRGGBB` with an opacity, as straight (not premultiplied) RGBA.
fn rgb(hex: u32, alpha: f32) -> [f32; 4] {
    let c = |shift: u32| ((hex >> shift) & 0xFF) as f32 / 255.0;
    [c(16), c(8), c(0), alpha]
}

/// `a` at t = 0 to `b` at t = 1 (t clamped).
fn mix(a: [f32; 4], b: [f32; 4], t: f32) -> [f32; 4] {
    let t = t.clamp(0.0, 1.0);
    std::array::from_fn(|i| a[i] + (b[i] - a[i]) * t)
}

impl Canvas {
    fn new(width: usize, height: usize, samples: usize) -> Canvas {
        Canvas {
            width,
            height,
            samples,
            px: vec![[0.0; 4]; width * height],
        }
    }

    /// Paints the shape `inside` with the straight RGBA colour `paint`
    /// (evaluated at each pixel centre). The fraction of a pixel's samples
    /// inside the shape scales the paint's opacity: that is the anti-aliasing.
    fn fill(&mut self, inside: impl Fn(f32, f32) -> bool, paint: impl Fn(f32, f32) -> [f32; 4]) {
        let n = self.samples;
        let step = 1.0 / n as f32;
        for y in 0..self.height {
            for x in 0..self.width {
                let mut hits = 0;
                for sy in 0..n {
                    for sx in 0..n {
                        let fx = x as f32 + (sx as f32 + 0.5) * step;
                        let fy = y as f32 + (sy as f32 + 0.5) * step;
                        hits += usize::from(inside(fx, fy));
                    }
                }
                if hits == 0 {
                    continue;
                }
                let c = paint(x as f32 + 0.5, y as f32 + 0.5);
                let a = c[3] * hits as f32 / (n * n) as f32;
                let d = &mut self.px[y * self.width + x];
                for i in 0..3 {
                    d[i] = c[i] * a + d[i] * (1.0 - a);
                }
                d[3] = a + d[3] * (1.0 - a);
            }
        }
    }

    /// Straight 8-bit RGBA; fully transparent pixels become (0, 0, 0, 0).
    fn to_rgba8(&self) -> Vec<[u8; 4]> {
        let q = |v: f32| (v.clamp(0.0, 1.0) * 255.0).round() as u8;
        self.px
            .iter()
            .map(|p| {
                let a = q(p[3]);
                if a == 0 {
                    return [0; 4];
                }
                [q(p[0] / p[3]), q(p[1] / p[3]), q(p[2] / p[3]), a]
            })
            .collect()
    }

    fn save(&self, path: &str) -> Result<u64, Box<dyn Error>> {
        let mut png = Vec::new();
        write_rgba_png(
            &mut png,
            self.width as u32,
            self.height as u32,
            &self.to_rgba8(),
        )?;
        fs::write(path, &png)?;
        Ok(png.len() as u64)
    }
}

fn everywhere(_: f32, _: f32) -> bool {
    true
}

fn in_circle(x: f32, y: f32, cx: f32, cy: f32, r: f32) -> bool {
    (x - cx).powi(2) + (y - cy).powi(2) <= r * r
}

/// Inside the capsule of radius `r` around the segment from (ax, ay) to (bx, by).
fn in_capsule(x: f32, y: f32, ax: f32, ay: f32, bx: f32, by: f32, r: f32) -> bool {
    let (dx, dy) = (bx - ax, by - ay);
    let t = (((x - ax) * dx + (y - ay) * dy) / (dx * dx + dy * dy)).clamp(0.0, 1.0);
    in_circle(x, y, ax + t * dx, ay + t * dy, r)
}

/// Signed distance to a box centred on (cx, cy) with half sizes (hw, hh) and
/// corners rounded to radius r; negative inside.
fn rounded_box(x: f32, y: f32, cx: f32, cy: f32, hw: f32, hh: f32, r: f32) -> f32 {
    let qx = (x - cx).abs() - hw + r;
    let qy = (y - cy).abs() - hh + r;
    qx.max(0.0).hypot(qy.max(0.0)) + qx.max(qy).min(0.0) - r
}

/// 5 × 7 glyphs of the title's letters, one row per byte, high bit left.
fn glyph(c: char) -> [u8; 7] {
    match c {
        'A' => [14, 17, 17, 31, 17, 17, 17],
        'D' => [30, 17, 17, 17, 17, 17, 30],
        'E' => [31, 16, 16, 30, 16, 16, 31],
        'G' => [14, 17, 16, 23, 17, 17, 15],
        'N' => [17, 25, 21, 19, 17, 17, 17],
        'O' => [14, 17, 17, 17, 17, 17, 14],
        'R' => [30, 17, 17, 30, 20, 18, 17],
        'S' => [15, 16, 16, 14, 1, 1, 30],
        _ => [0; 7],
    }
}

/// Inside the pixel-font text whose top-left corner is (left, top).
fn in_text(x: f32, y: f32, text: &str, left: f32, top: f32) -> bool {
    let (cx, cy) = ((x - left).floor(), (y - top).floor());
    if cx < 0.0 || !(0.0..7.0).contains(&cy) {
        return false;
    }
    let (cell, col) = ((cx as usize) / 6, (cx as usize) % 6);
    match text.chars().nth(cell) {
        Some(ch) if col < 5 => glyph(ch)[cy as usize] >> (4 - col) & 1 == 1,
        _ => false,
    }
}

/// The invented reader's boot screen.
fn write_splash() -> Result<(), Box<dyn Error>> {
    const W: usize = 240;
    const H: usize = 135;
    let mut rng = SeededRng::new(20260316);
    let mut c = Canvas::new(W, H, 4);

    // Sky: deep blue at the top to a warm horizon.
    let (top, mid, horizon) = (rgb(0x14305e, 1.0), rgb(0x3f7cc4, 1.0), rgb(0xf3c98b, 1.0));
    c.fill(everywhere, |_, y| {
        let t = y / 100.0;
        if t < 0.55 {
            mix(top, mid, t / 0.55)
        } else {
            mix(mid, horizon, (t - 0.55) / 0.45)
        }
    });

    // Sun with a soft glow fading over 40 pixels.
    let (sx, sy, sr) = (180.0f32, 48.0f32, 14.0f32);
    c.fill(everywhere, |x, y| {
        let d = ((x - sx).hypot(y - sy) - sr).max(0.0);
        let fade = (1.0 - d / 40.0).max(0.0);
        rgb(0xffe7a3, 0.7 * fade * fade)
    });
    c.fill(
        |x, y| in_circle(x, y, sx, sy, sr),
        |x, y| {
            mix(
                rgb(0xfff6cc, 1.0),
                rgb(0xffc441, 1.0),
                (x - sx).hypot(y - sy) / sr,
            )
        },
    );

    // Rolling hills, far (pale) then near (dark), shaded down their slopes.
    let far = |x: f32| 84.0 + 6.0 * (x / 23.0 + 0.7).sin() + 3.0 * (x / 11.0 + 2.1).sin();
    let near = |x: f32| 99.0 + 8.0 * (x / 31.0 + 2.4).sin() + 3.0 * (x / 13.0 + 0.3).sin();
    c.fill(
        |x, y| y >= far(x),
        |x, y| mix(rgb(0x8cc084, 1.0), rgb(0x5c9a5f, 1.0), (y - far(x)) / 20.0),
    );
    c.fill(
        |x, y| y >= near(x),
        |x, y| mix(rgb(0x4a9a45, 1.0), rgb(0x2b662d, 1.0), (y - near(x)) / 18.0),
    );
    // Flowers dotted over the near hill (seeded placement).
    let petals = [0xf7e463, 0xffffff, 0xea6f96];
    for i in 0..18 {
        let fx = 4.0 + rng.unit_f64() as f32 * (W as f32 - 8.0);
        let fy = near(fx) + 3.0 + rng.unit_f64() as f32 * 10.0;
        let colour = rgb(petals[i % petals.len()], 1.0);
        c.fill(|x, y| in_circle(x, y, fx, fy, 1.3), |_, _| colour);
    }

    // Soil along the bottom, with a few pebbles.
    let soil = |x: f32| 117.0 + 1.5 * (x / 7.0).sin() + (x / 19.0).sin();
    c.fill(
        |x, y| y >= soil(x),
        |_, y| mix(rgb(0x7a4e2a, 1.0), rgb(0x3f2613, 1.0), (y - 117.0) / 18.0),
    );
    for _ in 0..12 {
        let px = 3.0 + rng.unit_f64() as f32 * (W as f32 - 6.0);
        let py = 122.0 + rng.unit_f64() as f32 * 11.0;
        let r = 0.8 + rng.unit_f64() as f32 * 1.2;
        c.fill(
            |x, y| in_circle(x, (y - py) * 1.6 + py, px, py, r),
            |_, _| rgb(0xa88a66, 1.0),
        );
    }

    // Progress bar in the soil: a rounded outline, 60 % filled.
    c.fill(
        |x, y| rounded_box(x, y, 120.0, 127.0, 50.0, 3.5, 3.5).abs() <= 0.6,
        |_, _| rgb(0xf4f1e8, 0.95),
    );
    c.fill(
        |x, y| rounded_box(x, y, 100.5, 127.0, 29.0, 2.0, 2.0) <= 0.0,
        |_, _| rgb(0x9be37f, 1.0),
    );

    // Leaf logo on a round pale badge with a soft-edged shadow.
    let (lx, ly) = (56.0f32, 60.0f32);
    c.fill(
        |x, y| in_circle(x, y, lx + 1.5, ly + 2.0, 25.0),
        |x, y| rgb(0x000000, 0.3 * (1.0 - (x - lx).hypot(y - ly) / 30.0)),
    );
    c.fill(
        |x, y| in_circle(x, y, lx, ly, 24.0),
        |_, _| rgb(0xf4f8ef, 0.94),
    );
    // The leaf is a lens (two overlapping circles) turned 40° off vertical;
    // (u, v) are coordinates along and across it.
    let (sin, cos) = (-40.0f32 * PI / 180.0).sin_cos();
    let frame = move |x: f32, y: f32| {
        let (dx, dy) = (x - lx, y - ly);
        (dx * sin + dy * cos, dx * cos - dy * sin)
    };
    let (radius, offset) = (22.06f32, 14.06f32);
    let in_leaf = move |x: f32, y: f32| {
        let (u, v) = frame(x, y);
        u * u + (v - offset).powi(2) <= radius * radius
            && u * u + (v + offset).powi(2) <= radius * radius
    };
    c.fill(
        |x, y| {
            let (u, v) = frame(x, y);
            (15.0..21.0).contains(&u) && v.abs() <= 0.9
        },
        |_, _| rgb(0x1f7a3a, 1.0),
    );
    c.fill(in_leaf, move |x, y| {
        let (u, _) = frame(x, y);
        mix(rgb(0x6fd26a, 1.0), rgb(0x1f7a3a, 1.0), (u + 17.0) / 34.0)
    });
    // Midrib and three pairs of side veins leaning towards the tip (u < 0).
    c.fill(
        move |x, y| {
            let (u, v) = frame(x, y);
            let rib = v.abs() <= 0.6 && u.abs() <= 14.0;
            let vein = (0..3).any(|i| {
                let start = 10.0 - 7.0 * i as f32;
                (u - (start - 0.8 * v.abs())).abs() <= 0.55 && v.abs() <= 6.0 - 1.2 * i as f32
            });
            (rib || vein) && in_leaf(x, y)
        },
        |_, _| rgb(0xd9f7c9, 0.9),
    );

    // Title bar with the reader's name in a pixel font.
    c.fill(|_, y| y < 15.0, |_, _| rgb(0x0d1b2a, 0.85));
    c.fill(|_, y| (15.0..16.0).contains(&y), |_, _| rgb(0x9be37f, 0.8));
    let title = "GARDEN SENSOR READER";
    let left = ((W - (title.len() * 6 - 1)) / 2) as f32;
    c.fill(
        |x, y| in_text(x, y, title, left, 4.0),
        |_, _| rgb(0xf2f7f2, 1.0),
    );

    let bytes = c.save("sample-inputs/splash.png")?;
    println!("wrote sample-inputs/splash.png ({W}×{H}, {bytes} bytes)");
    Ok(())
}

/// The invented reader's four status icons, 32 × 32 on transparent backgrounds.
fn write_icons() -> Result<(), Box<dyn Error>> {
    fs::create_dir_all("sample-inputs/icons")?;
    type Draw = fn(&mut Canvas);
    let icons: [(&str, Draw); 4] = [
        ("thermometer", thermometer),
        ("droplet", droplet),
        ("sun", sun),
        ("battery", battery),
    ];
    for (name, draw) in icons {
        let mut c = Canvas::new(32, 32, 8);
        draw(&mut c);
        let path = format!("sample-inputs/icons/{name}.png");
        let bytes = c.save(&path)?;
        println!("wrote {path} (32×32, {bytes} bytes)");
    }
    Ok(())
}

fn thermometer(c: &mut Canvas) {
    let outline = |x, y, grow: f32| {
        in_capsule(x, y, 16.0, 5.5, 16.0, 20.0, 3.0 + grow)
            || in_circle(x, y, 16.0, 23.5, 5.5 + grow)
    };
    c.fill(|x, y| outline(x, y, 1.5), |_, _| rgb(0x1e1e1e, 1.0));
    c.fill(|x, y| outline(x, y, 0.0), |_, _| rgb(0xf2f4f7, 1.0));
    c.fill(
        |x, y| in_capsule(x, y, 16.0, 11.0, 16.0, 22.0, 1.4) || in_circle(x, y, 16.0, 23.5, 3.8),
        |x, y| {
            mix(
                rgb(0xf0533f, 1.0),
                rgb(0xb3231a, 1.0),
                (x - 13.0 + y - 20.0) / 10.0,
            )
        },
    );
    c.fill(
        |x, y| in_circle(x, y, 14.6, 22.2, 1.1),
        |_, _| rgb(0xffffff, 0.8),
    );
    for tick in [8.0, 12.0, 16.0] {
        c.fill(
            |x, y| in_capsule(x, y, 22.0, tick, 25.0, tick, 0.6),
            |_, _| rgb(0x1e1e1e, 1.0),
        );
    }
}

fn droplet(c: &mut Canvas) {
    // A circle with a cone up to a tip; `scale` shrinks it about its middle.
    let shape = |x: f32, y: f32, scale: f32| {
        let (x, y) = (16.0 + (x - 16.0) / scale, 18.0 + (y - 18.0) / scale);
        let (cx, cy, r, tip) = (16.0f32, 20.5f32, 9.0f32, 2.5f32);
        let reach = cy - tip;
        let half = (r / reach).asin();
        let along = y - tip;
        let in_cone = along > 0.0
            && (x - cx).abs().atan2(along) <= half
            && along <= (reach * reach - r * r).sqrt() * half.cos();
        in_circle(x, y, cx, cy, r) || in_cone
    };
    c.fill(|x, y| shape(x, y, 1.0), |_, _| rgb(0x0b3d91, 1.0));
    c.fill(
        |x, y| shape(x, y, 0.86),
        |_, y| mix(rgb(0x8fd3ff, 1.0), rgb(0x1f6fd6, 1.0), (y - 4.0) / 24.0),
    );
    c.fill(
        |x, y| ((x - 12.3) / 1.6).powi(2) + ((y - 20.5) / 3.6).powi(2) <= 1.0,
        |_, _| rgb(0xffffff, 0.75),
    );
}

fn sun(c: &mut Canvas) {
    for i in 0..8 {
        let (s, co) = (i as f32 * PI / 4.0).sin_cos();
        c.fill(
            |x, y| {
                in_capsule(
                    x,
                    y,
                    16.0 + 11.0 * co,
                    16.0 + 11.0 * s,
                    16.0 + 14.0 * co,
                    16.0 + 14.0 * s,
                    1.6,
                )
            },
            |_, _| rgb(0xf29a0e, 1.0),
        );
    }
    c.fill(
        |x, y| in_circle(x, y, 16.0, 16.0, 8.8),
        |_, _| rgb(0xc26a00, 1.0),
    );
    c.fill(
        |x, y| in_circle(x, y, 16.0, 16.0, 7.5),
        |x, y| {
            mix(
                rgb(0xfff1a0, 1.0),
                rgb(0xffb21f, 1.0),
                (x - 13.0).hypot(y - 13.0) / 10.0,
            )
        },
    );
}

fn battery(c: &mut Canvas) {
    let body = |x, y| rounded_box(x, y, 15.0, 16.0, 12.0, 7.5, 2.5);
    c.fill(
        |x, y| (-1.6..=0.0).contains(&body(x, y)),
        |_, _| rgb(0x2b2b2b, 1.0),
    );
    c.fill(
        |x, y| rounded_box(x, y, 28.5, 16.0, 1.8, 3.2, 1.0) <= 0.0,
        |_, _| rgb(0x2b2b2b, 1.0),
    );
    // Three of four cells charged; the empty one shows the background.
    for cell in 0..3 {
        let cx = 7.0 + 5.4 * cell as f32;
        c.fill(
            |x, y| rounded_box(x, y, cx, 16.0, 2.1, 4.3, 0.8) <= 0.0,
            |_, y| mix(rgb(0x5fe07a, 1.0), rgb(0x23a043, 1.0), (y - 12.0) / 8.0),
        );
    }
}
