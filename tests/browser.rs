//! The pages in a real browser: reports of examples, a diff page and the index are loaded by
//! headless Chromium with the network blocked, driven over the DevTools protocol on a pipe
//! (`--remote-debugging-pipe`: NUL-terminated JSON on file descriptors 3 and 4). Each page must
//! log no console error or exception, request nothing but itself (or `data:`/`about:`), show
//! every SVG figure and every formula at a non-zero size, fit the window's width, and leave a
//! full-page screenshot in `target/browser-artifacts/NAME.png` for a person to look at. A
//! control page that logs an error, throws and fetches an image shows that all of this is seen.
//!
//! Without Chromium the test says how to install it and passes, except under `CI=true`, where
//! a missing browser is a failure: CI must really run it.

mod common;
use common::*;

use std::io::{BufRead, BufReader, Write};
use std::os::fd::AsRawFd;
use std::os::unix::process::CommandExt;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc::{Receiver, RecvTimeoutError, channel};
use std::time::{Duration, Instant};

use serde_json::{Value, json};

/// The longest any one exchange with the browser may take before the test fails; a page of
/// ours loads in well under a second.
const STEP: Duration = Duration::from_secs(30);
/// The window the pages are laid out in (CSS pixels): a laptop screen.
const VIEW: (u32, u32) = (1100, 900);

/// The browser, found on the `PATH` or where Debian installs it.
fn chromium() -> Option<PathBuf> {
    let on_path = std::env::var_os("PATH").and_then(|p| {
        std::env::split_paths(&p)
            .map(|d| d.join("chromium"))
            .find(|c| c.is_file())
    });
    on_path.or_else(|| Some(PathBuf::from("/usr/bin/chromium")).filter(|p| p.is_file()))
}

/// A headless Chromium driven over the DevTools pipe, with one page attached.
struct Browser {
    child: Child,
    /// Commands to the browser (its fd 3).
    to: std::io::PipeWriter,
    /// Messages from the browser (its fd 4), parsed by a reader thread.
    from: Receiver<Value>,
    /// Events received while waiting for a reply, in order.
    events: Vec<Value>,
    next_id: u64,
    /// The page's session.
    session: String,
}

impl Browser {
    fn launch(exe: &Path, profile: &Path, log: &Path) -> Browser {
        let (child_reads, to) = std::io::pipe().unwrap();
        let (from_r, child_writes) = std::io::pipe().unwrap();
        let mut cmd = Command::new(exe);
        cmd.args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--disable-extensions",
            "--disable-default-apps",
            "--hide-scrollbars",
            "--mute-audio",
            // The network is blocked twice over: no name resolves, and anything else goes
            // to a proxy on a port where nothing listens.
            "--host-resolver-rules=MAP * ~NOTFOUND",
            "--proxy-server=127.0.0.1:9",
            "--remote-debugging-pipe",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .arg("about:blank")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(std::fs::File::create(log).unwrap());
        let (r, w) = (child_reads.as_raw_fd(), child_writes.as_raw_fd());
        // SAFETY: only dup2 and close between fork and exec, both async-signal-safe. Both ends
        // move to spare numbers first so that neither dup2 onto 3 or 4 can close the other.
        unsafe {
            cmd.pre_exec(move || {
                for (from, to) in [(r, 100), (w, 101), (100, 3), (101, 4)] {
                    if libc::dup2(from, to) < 0 {
                        return Err(std::io::Error::last_os_error());
                    }
                }
                libc::close(100);
                libc::close(101);
                Ok(())
            });
        }
        let child = cmd.spawn().expect("chromium starts");
        // The browser holds its own copies; closing ours lets a dead browser read as EOF.
        drop((child_reads, child_writes));
        let (tx, from) = channel();
        std::thread::spawn(move || {
            let mut reader = BufReader::new(from_r);
            let mut buf = Vec::new();
            while reader.read_until(0, &mut buf).is_ok_and(|n| n > 0) {
                if buf.last() == Some(&0) {
                    buf.pop();
                }
                if let Ok(v) = serde_json::from_slice::<Value>(&buf)
                    && tx.send(v).is_err()
                {
                    break;
                }
                buf.clear();
            }
        });
        let mut b = Browser {
            child,
            to,
            from,
            events: vec![],
            next_id: 0,
            session: String::new(),
        };
        let target = b.call("Target.createTarget", json!({"url": "about:blank"}), false);
        let id = target["targetId"].clone();
        let attached = b.call(
            "Target.attachToTarget",
            json!({"targetId": id, "flatten": true}),
            false,
        );
        b.session = attached["sessionId"].as_str().expect("a session").into();
        for domain in ["Page", "Network", "Runtime", "Log"] {
            b.call(&format!("{domain}.enable"), json!({}), true);
        }
        b.call(
            "Emulation.setDeviceMetricsOverride",
            json!({"width": VIEW.0, "height": VIEW.1, "deviceScaleFactor": 1, "mobile": false}),
            true,
        );
        b
    }

    /// The next message, or a failure naming `what` after [`STEP`].
    fn receive(&mut self, what: &str, since: Instant) -> Value {
        let left = STEP.saturating_sub(since.elapsed());
        match self.from.recv_timeout(left) {
            Ok(v) => v,
            Err(RecvTimeoutError::Timeout) => panic!("chromium did not answer {what} in {STEP:?}"),
            Err(RecvTimeoutError::Disconnected) => panic!("chromium exited during {what}"),
        }
    }

    /// Sends a command (to the page's session when `on_page`) and returns its result, keeping
    /// the events that arrive meanwhile.
    fn call(&mut self, method: &str, params: Value, on_page: bool) -> Value {
        self.next_id += 1;
        let id = self.next_id;
        let mut msg = json!({"id": id, "method": method, "params": params});
        if on_page {
            msg["sessionId"] = json!(self.session);
        }
        let mut bytes = serde_json::to_vec(&msg).unwrap();
        bytes.push(0);
        self.to.write_all(&bytes).expect("chromium reads commands");
        let since = Instant::now();
        loop {
            let v = self.receive(method, since);
            if v["id"] == json!(id) {
                if let Some(e) = v.get("error") {
                    panic!("{method}: {e}");
                }
                return v["result"].clone();
            }
            if v.get("method").is_some() {
                self.events.push(v);
            }
        }
    }

    /// Waits for the page's event `method`, kept or still to come.
    fn wait_for(&mut self, method: &str) {
        let is = |v: &Value| v["method"] == json!(method);
        let since = Instant::now();
        while !self.events.iter().any(is) {
            let v = self.receive(method, since);
            self.events.push(v);
        }
    }

    /// A JavaScript expression's value, returned as JSON.
    fn eval(&mut self, expression: &str) -> Value {
        let r = self.call(
            "Runtime.evaluate",
            json!({"expression": expression, "returnByValue": true}),
            true,
        );
        if let Some(e) = r.get("exceptionDetails") {
            panic!("{expression}: {e}");
        }
        r["result"]["value"].clone()
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// What one page did in the browser.
struct Visit {
    /// Console errors, failed assertions, log errors and uncaught exceptions, as text.
    errors: Vec<String>,
    /// Every URL the page requested.
    requests: Vec<String>,
    /// Rendered width and height of each SVG element (CSS pixels).
    svgs: Vec<(f64, f64)>,
    /// The same for each `math` element.
    formulas: Vec<(f64, f64)>,
    /// The page's full width and the window's (CSS pixels).
    widths: (f64, f64),
}

/// Standard base64 (RFC 4648) to bytes; screenshots arrive this way.
fn base64(text: &str) -> Vec<u8> {
    let value = |c: u8| match c {
        b'A'..=b'Z' => c - b'A',
        b'a'..=b'z' => c - b'a' + 26,
        b'0'..=b'9' => c - b'0' + 52,
        b'+' => 62,
        b'/' => 63,
        _ => panic!("not base64: {c}"),
    };
    let digits: Vec<u8> = text.bytes().filter(|c| *c != b'=').map(value).collect();
    digits
        .chunks(4)
        .flat_map(|q| {
            let n = q
                .iter()
                .enumerate()
                .fold(0u32, |n, (i, d)| n | u32::from(*d) << (18 - 6 * i));
            let bytes = n.to_be_bytes();
            bytes[1..q.len()].to_vec()
        })
        .collect()
}

/// Loads `page`, gathers what happened, and writes its screenshot to `shot`.
fn visit(b: &mut Browser, page: &Path, shot: &Path) -> Visit {
    b.events.clear();
    let url = format!("file://{}", page.display());
    b.call("Page.navigate", json!({"url": url}), true);
    b.wait_for("Page.loadEventFired");
    let sizes = |b: &mut Browser, selector: &str| -> Vec<(f64, f64)> {
        let js = format!(
            "JSON.stringify(Array.from(document.querySelectorAll('{selector}')).map(e => {{ \
             const r = e.getBoundingClientRect(); return [r.width, r.height]; }}))"
        );
        serde_json::from_str(b.eval(&js).as_str().unwrap()).unwrap()
    };
    let svgs = sizes(b, "svg");
    let formulas = sizes(b, "math");
    let widths = (
        b.eval("document.documentElement.scrollWidth")
            .as_f64()
            .unwrap(),
        b.eval("window.innerWidth").as_f64().unwrap(),
    );
    let metrics = b.call("Page.getLayoutMetrics", json!({}), true);
    let height = metrics["cssContentSize"]["height"].as_f64().unwrap().ceil();
    let png = b.call(
        "Page.captureScreenshot",
        json!({"format": "png", "captureBeyondViewport": true,
               "clip": {"x": 0, "y": 0, "width": VIEW.0, "height": height, "scale": 1}}),
        true,
    );
    std::fs::write(shot, base64(png["data"].as_str().unwrap())).unwrap();
    let mut errors = vec![];
    let mut requests = vec![];
    for e in &b.events {
        let p = &e["params"];
        match e["method"].as_str().unwrap_or("") {
            "Network.requestWillBeSent" => {
                requests.push(p["request"]["url"].as_str().unwrap_or("").to_string())
            }
            "Runtime.consoleAPICalled"
                if matches!(p["type"].as_str(), Some("error" | "assert")) =>
            {
                errors.push(format!("console: {}", p["args"]))
            }
            "Log.entryAdded" if p["entry"]["level"] == "error" => {
                errors.push(format!("log: {}", p["entry"]))
            }
            "Runtime.exceptionThrown" => {
                errors.push(format!("exception: {}", p["exceptionDetails"]))
            }
            _ => {}
        }
    }
    Visit {
        errors,
        requests,
        svgs,
        formulas,
        widths,
    }
}

/// The run-file of the browser's own page: an example with formulas in its prose.
fn with_math() -> String {
    common::example("steady-state-line.md").replacen(
        "\n\nA continuous probe",
        "\n\nIn the steady state $\\rho_{ee} = \\frac{s/2}{1 + s + 4\\Delta^2/\\Gamma^2}$ with \
         $s = 2\\Omega^2/\\Gamma^2$, and each atom scatters\n\n\
         $$R = \\Gamma \\rho_{ee}, \\qquad \\hbar\\omega \\ni E$$\n\nA continuous probe",
        1,
    )
}

#[test]
fn pages_render_in_a_browser_without_errors_or_requests() {
    let Some(exe) = chromium() else {
        if std::env::var("CI").as_deref() == Ok("true") {
            panic!(
                "CI=true but chromium is missing: apt-get install -y --no-install-recommends chromium"
            );
        }
        println!(
            "browser test skipped: chromium not found (Debian: apt-get install -y --no-install-recommends chromium)"
        );
        return;
    };
    let t0 = Instant::now();
    let dir = temp_dir("pages");
    let out = dir.join("out");
    let math = dir.join("math.md");
    std::fs::write(&math, with_math()).unwrap();
    let mut run = bin();
    run.arg("run");
    for name in [
        "rabi-chevron",
        "stirap",
        "ramsey-light-shift",
        "zeeman-raman",
    ] {
        run.arg(example_path(&format!("{name}.md")));
    }
    let o = run
        .arg(&math)
        .arg("--out")
        .arg(&out)
        .arg("--cache")
        .arg(dir.join("cache"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    // Diff pages: a line plot overlaid (the math page's line) and heat maps side by side.
    for (name, set) in [
        ("math", "rabi=2π × 9 MHz"),
        ("rabi-chevron", "rabi=2π × 30 kHz"),
    ] {
        let o = bin()
            .arg("rerun")
            .arg(out.join(format!("{name}.record.json")))
            .args(["--set", set, "--out"])
            .arg(dir.join("new"))
            .arg("--cache")
            .arg(dir.join("cache"))
            .output()
            .unwrap();
        assert!(o.status.code().is_some_and(|c| c < 2), "{}", text(&o));
        let o = bin()
            .arg("diff")
            .arg(out.join(format!("{name}.record.json")))
            .arg(dir.join("new").join(format!("{name}.html")))
            .arg("--html")
            .arg(out.join(format!("diff-{name}.html")))
            .output()
            .unwrap();
        assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    }
    // Each page with the number of figures it must show.
    let pages = [
        ("rabi-chevron", 1),
        ("stirap", 1),
        ("ramsey-light-shift", 1),
        ("zeeman-raman", 3),
        ("math", 1),
        ("index", 0),
        ("diff-math", 1),
        ("diff-rabi-chevron", 3),
    ];

    let artefacts = Path::new(env!("CARGO_MANIFEST_DIR")).join("target/browser-artifacts");
    std::fs::create_dir_all(&artefacts).unwrap();
    let mut browser = Browser::launch(&exe, &dir.join("profile"), &artefacts.join("chromium.log"));
    // A control page that does everything the pages must not: the harness has to see it all.
    let control = dir.join("control.html");
    std::fs::write(
        &control,
        "<!DOCTYPE html><html><body><div style=\"width:3000px\">wide</div>\
         <img src=\"http://192.0.2.1/x.png\"><script>console.error('boom'); undefined_call();</script>\
         </body></html>",
    )
    .unwrap();
    let v = visit(&mut browser, &control, &artefacts.join("control.png"));
    assert!(
        v.errors.iter().any(|e| e.contains("boom")),
        "{:?}",
        v.errors
    );
    assert!(
        v.errors.iter().any(|e| e.starts_with("exception")),
        "{:?}",
        v.errors
    );
    assert!(
        v.requests.iter().any(|u| u.starts_with("http://192.0.2.1")),
        "{:?}",
        v.requests
    );
    assert!(v.widths.0 > v.widths.1, "{:?}", v.widths);
    for (name, figures) in pages {
        let page = out.join(format!("{name}.html"));
        let shot = artefacts.join(format!("{name}.png"));
        let v = visit(&mut browser, &page, &shot);
        let own = format!("file://{}", page.display());
        assert!(v.errors.is_empty(), "{name}: {:#?}", v.errors);
        let foreign: Vec<&String> = v
            .requests
            .iter()
            .filter(|u| **u != own && !u.starts_with("data:") && !u.starts_with("about:"))
            .collect();
        assert!(foreign.is_empty(), "{name} requested {foreign:?}");
        assert!(
            v.requests.contains(&own),
            "{name}: the page itself was not loaded"
        );
        assert_eq!(v.svgs.len(), figures, "{name}: figures");
        for (w, h) in &v.svgs {
            assert!(*w > 100.0 && *h > 50.0, "{name}: a figure is {w} × {h} px");
        }
        if name == "math" {
            assert!(
                v.formulas.len() >= 3,
                "{name}: {} formulas",
                v.formulas.len()
            );
        }
        for (w, h) in &v.formulas {
            assert!(*w > 0.0 && *h > 0.0, "{name}: a formula is {w} × {h} px");
        }
        assert!(
            v.widths.0 <= v.widths.1,
            "{name}: the page is wider than the window: {:?}",
            v.widths
        );
        let png = std::fs::read(&shot).unwrap();
        assert!(
            png.starts_with(b"\x89PNG\r\n\x1a\n") && png.len() > 10_000,
            "{name}: screenshot"
        );
        println!(
            "{name}: {} figure(s), {} formula(s), {} request(s), screenshot {} ({} KB)",
            v.svgs.len(),
            v.formulas.len(),
            v.requests.len(),
            shot.display(),
            png.len() / 1024
        );
    }
    let math_page = std::fs::read_to_string(out.join("math.html")).unwrap();
    assert!(
        math_page.matches("<math").count() >= 3,
        "the formulas became MathML"
    );
    println!(
        "browser test: {} pages in {:.1} s",
        pages.len(),
        t0.elapsed().as_secs_f64()
    );
    // The browser's profile is tens of megabytes; the screenshots stay under target/.
    drop(browser);
    let _ = std::fs::remove_dir_all(&dir);
}
