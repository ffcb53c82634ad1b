//! The web page in a real browser: Debian's headless Chromium, driven over
//! WebDriver (chromedriver, fantoccini), against the real binary
//! (`tuneward run` with a rig on a pseudo-terminal and the tests' own
//! controller double on loopback, tests/common/controller.rs).
//!
//! The page is loaded at a phone's width (360 CSS pixels, Chromium's
//! mobile emulation); it shows the state, a preset and a nudge clicked on
//! it reach the controller as `GOTO` lines (the double's record, not the
//! service's word) and the page then shows the new position; a cross-site
//! form post and a page reached by a rebinding name are refused; a
//! screenshot is taken and its PNG size checked; nothing overflows 360 px.
//!
//! Chromium and chromedriver are required: without them the test fails,
//! saying how to install them, unless `TUNEWARD_SKIP_BROWSER=1`.

use std::net::TcpListener;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use fantoccini::{Client, ClientBuilder, Locator};
use tokio::io::AsyncWriteExt;
use tuneward::journal::{Journal, Recorded};
use tuneward::rig::dialect::Dialect;

mod common;

use common::controller::{Fault, FaultyController};
use common::{rig_behind_symlink, wait_journal, Logged, Proc};

const CHROMIUM: &str = "/usr/bin/chromium";
const CHROMEDRIVER: &str = "/usr/bin/chromedriver";

/// The browser's programs, or why the test cannot run.
fn browser_present() -> Result<(), String> {
    for p in [CHROMIUM, CHROMEDRIVER] {
        if !Path::new(p).exists() {
            return Err(format!(
                "{p} not found: install Chromium and its driver (`apt-get install -y chromium chromium-driver`, as .ci/run does), or set TUNEWARD_SKIP_BROWSER=1 to skip this test"
            ));
        }
    }
    Ok(())
}

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

/// chromedriver on a free loopback port, once it accepts connections.
fn start_chromedriver() -> (Proc, String) {
    let port = free_port();
    let child = Command::new(CHROMEDRIVER)
        .arg(format!("--port={port}"))
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("chromedriver starts");
    let proc = Proc(child);
    let until = Instant::now() + Duration::from_secs(20);
    while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
        assert!(Instant::now() < until, "chromedriver did not listen");
        std::thread::sleep(Duration::from_millis(50));
    }
    (proc, format!("http://127.0.0.1:{port}"))
}

async fn browser(driver: &str, profile: &Path) -> Client {
    let mut caps = serde_json::Map::new();
    caps.insert(
        "goog:chromeOptions".into(),
        serde_json::json!({
            "binary": CHROMIUM,
            "args": [
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-dev-shm-usage",
                format!("--user-data-dir={}", profile.display()),
                // A name that resolves to this machine, as a rebinding
                // attacker's DNS would make it.
                "--host-resolver-rules=MAP rebind.example 127.0.0.1",
            ],
            "mobileEmulation": {
                "deviceMetrics": { "width": 360, "height": 780, "pixelRatio": 1.0 }
            }
        }),
    );
    let connector = hyper_util::client::legacy::connect::HttpConnector::new();
    ClientBuilder::new(connector)
        .capabilities(caps)
        .connect(driver)
        .await
        .expect("a Chromium session")
}

/// Waits until the element's text contains `want`.
async fn wait_text(c: &Client, id: &str, want: &str) -> String {
    let until = Instant::now() + Duration::from_secs(15);
    loop {
        let text = match c.find(Locator::Id(id)).await {
            Ok(e) => e.text().await.unwrap_or_default(),
            Err(_) => String::new(),
        };
        if text.contains(want) {
            return text;
        }
        assert!(
            Instant::now() < until,
            "#{id} says {text:?}, wanted {want:?}"
        );
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
}

/// Waits until the controller double has received `line`.
fn wait_received(ctl: &FaultyController, line: &str) {
    let until = Instant::now() + Duration::from_secs(10);
    while !ctl.received().iter().any(|l| l == line) {
        assert!(
            Instant::now() < until,
            "no {line:?}; the controller got {:?}",
            ctl.received()
        );
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// A PNG's width and height, from its IHDR chunk (PNG specification,
/// ISO/IEC 15948, §11.2.2: the signature's 8 bytes, then the IHDR chunk's
/// length and type, then width and height as 4-byte big-endian numbers).
fn png_size(png: &[u8]) -> (u32, u32) {
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n", "not a PNG");
    assert_eq!(&png[12..16], b"IHDR");
    let n = |b: &[u8]| u32::from_be_bytes([b[0], b[1], b[2], b[3]]);
    (n(&png[16..20]), n(&png[20..24]))
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_page_in_chromium_steers_the_loop_and_refuses_other_sites() {
    if let Err(why) = browser_present() {
        if std::env::var("TUNEWARD_SKIP_BROWSER").as_deref() == Ok("1") {
            eprintln!("skipped (TUNEWARD_SKIP_BROWSER=1): {why}");
            return;
        }
        panic!("{why}");
    }
    let dir = tempfile::tempdir().unwrap();
    let (mut rig, _far, rig_link) = rig_behind_symlink(dir.path());
    let ctl = FaultyController::start(0, 2000.0, Fault::None);
    let config = common::station_config(dir.path(), &rig_link, &ctl.addr, 2000, "");
    let mut text = std::fs::read_to_string(&config).unwrap();
    text.push_str(
        r#"
[antenna]
loop_diameter_m = 1.0
conductor_diameter_m = 0.022

[[preset]]
name = "cw-40"
hz = 7030000

[[preset]]
name = "parked"
steps = 2500

[web]
listen = "127.0.0.1:0"
"#,
    );
    std::fs::write(&config, text).unwrap();
    let journal = Journal::new(dir.path().join("motor.state"));
    let mut run = Logged::run(&config);
    wait_journal(&journal, Recorded::Known(0));
    let line = run.wait_log(&["web page ready"]);
    let url = line
        .split_whitespace()
        .find_map(|w| w.strip_prefix("url="))
        .unwrap()
        .to_string();
    let port = url
        .trim_end_matches('/')
        .rsplit(':')
        .next()
        .unwrap()
        .to_string();

    let (_driver, driver_url) = start_chromedriver();
    let profile = tempfile::tempdir().unwrap();
    let c = browser(&driver_url, profile.path()).await;
    c.goto(&url).await.unwrap();
    wait_text(&c, "position", "step 0").await;
    wait_text(&c, "link", "live").await;

    // The rig tunes to 7.15 MHz: the page shows it, and the loop follows.
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    rig.write_all(&dialect.encode_frequency(7_150_000, 0))
        .await
        .unwrap();
    rig.flush().await.unwrap();
    wait_text(&c, "rx", "7.150000 MHz").await;
    wait_text(&c, "band", "40m").await;
    wait_received(&ctl, "GOTO 1500");
    wait_text(&c, "position", "step 1500").await;
    wait_text(&c, "tuned", "7.150000 MHz").await;
    // Tuned for the rig: step 1500 is where the calibration puts 7.15 MHz,
    // so the estimate there is a match.
    wait_text(&c, "swr-now", "1.00 : 1").await;

    // A preset clicked: 7.03 MHz is step 300 on this calibration.
    c.find(Locator::Css("button[data-preset='cw-40']"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    wait_received(&ctl, "GOTO 300");
    wait_text(&c, "position", "step 300").await;
    // A nudge clicked (the size box says 10).
    c.find(Locator::Id("nudge-up"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    wait_received(&ctl, "GOTO 310");
    wait_text(&c, "position", "step 310").await;
    wait_journal(&journal, Recorded::Known(310));
    // "Find resonance here": this station describes no loop and is not
    // polled, so the core refuses it with the reason; nothing moves.
    let before = ctl.received().len();
    c.find(Locator::Id("peak"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    wait_text(&c, "answer", "no noise-peak search now").await;
    let after = ctl.received();
    assert!(
        !after[before..].iter().any(|l| l.starts_with("GOTO")),
        "{after:?}"
    );
    // "Calibrate this band": it changes the rig's frequency, so the page
    // asks first. Declined, nothing is asked of the service; accepted, the
    // request carries the consent and the core refuses this station (no
    // loop described, not polled) with the reason; nothing moves.
    wait_text(&c, "sweep-band", "40m").await;
    let calibrate = c.find(Locator::Id("calibrate")).await.unwrap();
    calibrate.click().await.unwrap();
    let question = c.get_alert_text().await.unwrap();
    assert!(
        question.contains("sets the rig's receive frequency"),
        "{question}"
    );
    c.dismiss_alert().await.unwrap();
    tokio::time::sleep(Duration::from_millis(300)).await;
    let answer = c
        .find(Locator::Id("answer"))
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    assert!(
        !answer.starts_with("calibrate"),
        "declined, yet asked: {answer}"
    );
    calibrate.click().await.unwrap();
    c.accept_alert().await.unwrap();
    wait_text(&c, "answer", "no calibration sweep now").await;
    let after = ctl.received();
    assert!(
        !after[before..].iter().any(|l| l.starts_with("GOTO")),
        "{after:?}"
    );
    // The marker on the travel bar is where the page says (310 of 0..3000).
    let left = c
        .execute(
            "return document.getElementById('bar-marker').style.left",
            vec![],
        )
        .await
        .unwrap();
    assert_eq!(left.as_str(), Some("10.33%"));
    // The SWR estimate is drawn, the rig's frequency marked on it.
    c.find(Locator::Id("swr-line")).await.unwrap();
    c.find(Locator::Id("swr-rig")).await.unwrap();
    // 7.15 MHz against a loop resonant near 7.031 MHz: far off.
    wait_text(&c, "swr-now", "over 99 : 1").await;
    wait_text(&c, "recent", "operator nudge").await;

    // Usable at a phone's width: nothing wider than 360 CSS pixels.
    let widths = c
        .execute(
            "return [window.innerWidth, document.documentElement.scrollWidth, document.body.scrollWidth]",
            vec![],
        )
        .await
        .unwrap();
    let widths: Vec<u64> = widths
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap())
        .collect();
    assert_eq!(widths[0], 360, "{widths:?}");
    assert!(widths[1] <= 360 && widths[2] <= 360, "overflow: {widths:?}");

    // A screenshot in this state: a PNG the width of the phone's screen.
    let png = c.screenshot().await.unwrap();
    let (w, h) = png_size(&png);
    assert_eq!(w, 360, "{w}x{h}");
    assert!((600..=1000).contains(&h), "{w}x{h}");
    let shot = Path::new(env!("CARGO_TARGET_TMPDIR")).join("tuneward-page-360.png");
    std::fs::write(&shot, &png).unwrap();

    // A cross-site form post (another page's form, here a data: URL,
    // posting JSON-looking text): refused, nothing moves.
    let form = format!(
        "data:text/html,<form id=f method=post enctype=text/plain action='http://127.0.0.1:{port}/api/do'><input name='{{\"do\":\"goto\",\"steps\":2000,\"x\":\"' value='\"}}'></form><script>document.getElementById('f').submit()</script>"
    );
    c.goto(&form).await.unwrap();
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        let body = c
            .execute(
                "return document.body ? document.body.innerText : ''",
                vec![],
            )
            .await
            .unwrap();
        let body = body.as_str().unwrap_or_default().to_string();
        if body.contains("refused") || body.contains("expected") {
            assert!(body.contains("application/json"), "{body}");
            break;
        }
        assert!(Instant::now() < until, "the form's answer: {body:?}");
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    // A page reached through a name that resolves here (DNS rebinding):
    // the server refuses it for naming another host.
    c.goto(&format!("http://rebind.example:{port}/"))
        .await
        .unwrap();
    let body = c
        .execute(
            "return document.body ? document.body.innerText : ''",
            vec![],
        )
        .await
        .unwrap();
    let body = body.as_str().unwrap_or_default();
    assert!(
        body.contains("expected a Host naming this server"),
        "{body}"
    );
    // And a fetch from that page to the server cannot command it.
    let posted = c
        .execute_async(
            r#"const done = arguments[arguments.length - 1];
               fetch('/api/do', {method: 'POST', headers: {'Content-Type': 'application/json'},
                     body: JSON.stringify({do: 'goto', steps: 2000})})
                 .then(r => done(r.status)).catch(e => done(String(e)));"#,
            vec![],
        )
        .await
        .unwrap();
    assert_eq!(posted.as_u64(), Some(421), "{posted}");
    std::thread::sleep(Duration::from_millis(300));
    assert!(
        !ctl.received().iter().any(|l| l == "GOTO 2000"),
        "{:?}",
        ctl.received()
    );
    assert_eq!(journal.load().unwrap(), Some(Recorded::Known(310)));

    c.close().await.unwrap();
    run.proc.signal(libc::SIGTERM);
    assert_eq!(run.proc.wait_exit(Duration::from_secs(10)).code(), Some(0));
}
