//! Headless Chromium (Debian's `chromium`, installed by `scripts/test.sh`, or
//! the binary named by `GEOFOLD_CHROMIUM`) opening a page from a file, and
//! PNG decoding for pixel checks.
//!
//! Chromium started with `--enable-logging=stderr --v=0` writes every console
//! message (script errors, refused loads, Content Security Policy violations)
//! to stderr as a line containing `CONSOLE`; [`console_lines`] picks them out.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

pub fn chromium() -> PathBuf {
    let path = std::env::var_os("GEOFOLD_CHROMIUM")
        .map_or_else(|| PathBuf::from("/usr/bin/chromium"), PathBuf::from);
    assert!(
        path.exists(),
        "{} not found: install Debian's chromium (scripts/test.sh does) or set GEOFOLD_CHROMIUM",
        path.display()
    );
    path
}

/// Runs Chromium on `page` with `extra` arguments; returns (stdout, stderr).
pub fn run_chromium(page: &Path, extra: &[String]) -> (String, String) {
    let profile = tempfile::tempdir().unwrap();
    let mut child = Command::new(chromium())
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--hide-scrollbars",
            "--force-device-scale-factor=1",
            "--enable-logging=stderr",
            "--v=0",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(extra)
        .arg(format!("file://{}", page.display()))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Read both pipes on threads so a full pipe cannot stall Chromium.
    let mut stdout = child.stdout.take().unwrap();
    let mut stderr = child.stderr.take().unwrap();
    let out = std::thread::spawn(move || {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut stdout, &mut s).unwrap();
        s
    });
    let err = std::thread::spawn(move || {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut stderr, &mut s).unwrap();
        s
    });
    let started = Instant::now();
    loop {
        if child.try_wait().unwrap().is_some() {
            break;
        }
        if started.elapsed() > Duration::from_secs(120) {
            child.kill().unwrap();
            panic!("chromium did not finish within 120 s");
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    (out.join().unwrap(), err.join().unwrap())
}

/// The console messages among Chromium's stderr lines.
pub fn console_lines(stderr: &str) -> Vec<&str> {
    stderr.lines().filter(|l| l.contains("CONSOLE")).collect()
}

/// The DOM Chromium built from `page`, after asserting that it logged no
/// console message.
pub fn dom_without_console_errors(page: &Path) -> String {
    let (dom, stderr) = run_chromium(page, &["--dump-dom".to_string()]);
    assert_eq!(
        console_lines(&stderr),
        Vec::<&str>::new(),
        "console messages on {}",
        page.display()
    );
    dom
}

/// A screenshot of `page` in a `width` × `height` window, written to `shot`.
pub fn screenshot(page: &Path, shot: &Path, width: u32, height: u32) -> Image {
    run_chromium(
        page,
        &[
            format!("--screenshot={}", shot.display()),
            format!("--window-size={width},{height}"),
        ],
    );
    Image::decode(&std::fs::read(shot).unwrap())
}

/// A decoded PNG.
pub struct Image {
    pub width: u32,
    pub height: u32,
    pub channels: usize,
    pub pixels: Vec<u8>,
}

impl Image {
    pub fn decode(bytes: &[u8]) -> Image {
        let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
        let mut reader = decoder.read_info().unwrap();
        let mut pixels = vec![0; reader.output_buffer_size().unwrap()];
        let info = reader.next_frame(&mut pixels).unwrap();
        Image {
            width: info.width,
            height: info.height,
            channels: info.color_type.samples(),
            pixels,
        }
    }

    /// The RGB of pixel `i` (row-major).
    pub fn colour_at(&self, i: usize) -> (u8, u8, u8) {
        let at = i * self.channels;
        (self.pixels[at], self.pixels[at + 1], self.pixels[at + 2])
    }

    /// The RGB of the pixel at (x, y).
    pub fn colour_xy(&self, x: u32, y: u32) -> (u8, u8, u8) {
        self.colour_at((y * self.width + x) as usize)
    }

    /// Number of pixels.
    pub fn len(&self) -> usize {
        (self.width * self.height) as usize
    }
}
