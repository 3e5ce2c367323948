//! Configuration tests: the sample parses, and a table of broken files each gets the message it must.

use super::*;

const SAMPLE: &str = include_str!("../../oedolog.sample.toml");

/// A small valid file that the broken cases below each spoil in one place.
const BASE: &str = r#"
[store]
path = "lab.sqlite"

[[bus]]
id = "line-a"
kind = "modbus-rtu"
device = "/dev/ttyUSB0"
baud = 19200

[[frame]]
id = "F1"
bus = "line-a"
unit = 1
ring_diameter_mm = 63.5
[frame.displacement]
register = { table = "input", address = 0, type = "i32" }
calibration = { gain = 0.0001 }
[frame.load]
register = { table = "input", address = 2, type = "i32" }
calibration = { gain = 0.0001 }
"#;

#[test]
fn the_sample_file_is_valid_and_complete() {
    let config = Config::parse(SAMPLE, Purpose::Run).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(config.buses.len(), 3);
    assert_eq!(config.frames.len(), 3);
    let f1 = &config.frames[0];
    assert_eq!(f1.loading, Loading::DeadWeight { lever_ratio: 10.0 });
    assert!((f1.ring_area_mm2 - 3166.92).abs() < 0.01, "π·63.5²/4 = 3166.92 mm²");
    assert_eq!(f1.poll.fast, Duration::from_millis(200));
    assert_eq!(f1.deflection.as_ref().unwrap().unloading.len(), 4);
    let BusKind::LineGauge(gauge) = &config.buses[2].kind else { panic!() };
    assert_eq!(gauge.request.as_deref(), Some(&b"?\r"[..]));
    assert!(config.summary().contains("bus bench-rs485: modbus-rtu /dev/ttyUSB0 19200 baud; frames: F1"));
}

#[test]
fn base_file_is_valid_and_defaults_apply() {
    let config = Config::parse(BASE, Purpose::Run).unwrap_or_else(|e| panic!("{e}"));
    let BusKind::Rtu(line) = &config.buses[0].kind else { panic!() };
    assert_eq!(line.parity, Parity::Even, "the serial-line spec's default");
    assert_eq!(line.gap, silent_interval(19_200));
    assert_eq!(config.http.listen.to_string(), DEFAULT_LISTEN);
    assert_eq!(config.store.as_ref().unwrap().flush, Duration::from_millis(500));
    assert_eq!(config.frames[0].poll.steady, Duration::from_secs(1));
    assert!((config.frames[0].displacement.calibration.apply(123_456.0) - 12.3456).abs() < 1e-12);
}

#[test]
fn calibration_polynomial_evaluates_in_horner_form() {
    let p = Calibration::Polynomial(vec![1.0, 2.0, 3.0]);
    assert_eq!(p.apply(2.0), 1.0 + 4.0 + 12.0);
}

/// (name, change to BASE, field the message must name, words it must contain, line it must point at)
type Case = (&'static str, fn(&str) -> String, &'static str, &'static str, usize);

fn replace(from: &'static str, to: &'static str) -> impl Fn(&str) -> String {
    move |s: &str| {
        assert!(s.contains(from), "BASE lacks `{from}`");
        s.replacen(from, to, 1)
    }
}

#[test]
fn broken_files_each_get_a_message_naming_the_field_and_what_is_allowed() {
    let cases: Vec<Case> = vec![
        (
            "unknown field",
            |s| replace("baud = 19200", "baud = 19200\nspeed = 9")(s),
            "bus[0].speed",
            "unknown field `speed`",
            10,
        ),
        ("wrong type", |s| replace("unit = 1", "unit = \"one\"")(s), "frame[0].unit", "invalid type", 14),
        (
            "missing bus",
            |s| replace("bus = \"line-a\"", "bus = \"line-b\"")(s),
            "frame[0].bus",
            "no bus `line-b` (buses: line-a)",
            13,
        ),
        (
            "duplicate frame id",
            |s| format!("{s}{}", &s[s.find("[[frame]]").unwrap()..]),
            "frame[1].id",
            "frame id `F1` is used twice",
            23,
        ),
        ("unit outside 1..247", |s| replace("unit = 1", "unit = 248")(s), "frame[0].unit", "allowed 1 to 247", 14),
        ("bad baud", |s| replace("baud = 19200", "baud = 20000")(s), "bus[0].baud", "allowed: 1200, 2400", 9),
        (
            "bad register type",
            |s| {
                replace(
                    "type = \"i32\" }\ncalibration = { gain = 0.0001 }\n[frame.load]",
                    "type = \"i48\" }\ncalibration = { gain = 0.0001 }\n[frame.load]",
                )(s)
            },
            "frame[0].displacement.register",
            "unknown variant `i48`",
            17,
        ),
        (
            "negative period",
            |s| replace("unit = 1", "unit = 1\npoll_ms = -5")(s),
            "frame[0].poll_ms",
            "allowed 1 to 3600000 ms",
            15,
        ),
        (
            // One unit, 4 registers at 19 200 8E1: (8 + 13) × 0.5729 ms + 2 × 2.0052 ms = 16.04 ms a round
            // (Modbus over Serial Line V1.02 §2.5.1.1, computed), so below 10 ms nothing fits.
            "period shorter than the serial line can carry",
            |s| replace("unit = 1", "unit = 1\npoll_ms = 5")(s),
            "frame[0].poll_ms",
            "5 ms is shorter than bus `line-a` can poll its 1 unit(s) at 19200 baud (16.04 ms a round at the least) (allowed: 10 to 3600000 ms here)",
            15,
        ),
        (
            // At 115 200 baud: 21 × 0.0955 ms + 2 × 1.750 ms (fixed above 19 200) = 5.51 ms a round.
            "fast period shorter than a fast serial line can carry",
            |s| {
                replace("baud = 19200", "baud = 115200")(&replace(
                    "unit = 1",
                    "unit = 1\npoll_ms = 10\nfast_poll_ms = 5",
                )(s))
            },
            "frame[0].fast_poll_ms",
            "5 ms is shorter than bus `line-a` can poll its 1 unit(s) at 115200 baud (5.51 ms a round at the least) (allowed: 6 to 3600000 ms here)",
            16,
        ),
        (
            "bad parity",
            |s| replace("baud = 19200", "baud = 19200\nparity = \"mark\"")(s),
            "bus[0].parity",
            "allowed: none, even, odd",
            10,
        ),
        (
            "duplicate bus id",
            |s| {
                replace(
                    "[[frame]]",
                    "[[bus]]\nid = \"line-a\"\nkind = \"modbus-tcp\"\naddress = \"10.0.0.1:502\"\n\n[[frame]]",
                )(s)
            },
            "bus[1].id",
            "bus id `line-a` is used twice",
            12,
        ),
        (
            "two frames on one unit",
            |s| format!("{s}{}", s[s.find("[[frame]]").unwrap()..].replace("\"F1\"", "\"F2\"")),
            "frame[1].unit",
            "unit 1 on bus `line-a` is already frame `F1`",
            25,
        ),
        (
            "zero ring",
            |s| replace("ring_diameter_mm = 63.5", "ring_diameter_mm = 0.0")(s),
            "frame[0].ring_diameter_mm",
            "allowed 20 to 200 mm",
            15,
        ),
        (
            "negative lever ratio",
            |s| replace("unit = 1", "unit = 1\nlever_ratio = -10.0")(s),
            "frame[0].lever_ratio",
            "allowed a positive ratio",
            15,
        ),
        (
            "zero calibration gain",
            |s| {
                replace("calibration = { gain = 0.0001 }\n[frame.load]", "calibration = { gain = 0.0 }\n[frame.load]")(
                    s,
                )
            },
            "frame[0].displacement.calibration",
            "non-zero gain",
            16,
        ),
        (
            "fast slower than steady",
            |s| replace("unit = 1", "unit = 1\npoll_ms = 500\nfast_poll_ms = 900")(s),
            "frame[0].fast_poll_ms",
            "allowed: fast_poll_ms ≤ poll_ms",
            16,
        ),
        ("missing store", |s| replace("[store]\npath = \"lab.sqlite\"", "")(s), "store", "missing table [store]", 1),
        (
            "listen not an address",
            |s| replace("[[bus]]", "[http]\nlisten = \"everywhere\"\n\n[[bus]]")(s),
            "http.listen",
            "not an address",
            6,
        ),
        (
            "tcp bus without address",
            |s| replace("kind = \"modbus-rtu\"\ndevice = \"/dev/ttyUSB0\"\nbaud = 19200", "kind = \"modbus-tcp\"")(s),
            "bus[0].address",
            "needs `address`",
            7,
        ),
        (
            "rtu setting on tcp bus",
            |s| {
                replace(
                    "kind = \"modbus-rtu\"\ndevice = \"/dev/ttyUSB0\"",
                    "kind = \"modbus-tcp\"\naddress = \"10.0.0.2:502\"",
                )(s)
            },
            "bus[0].baud",
            "not a setting of a modbus-tcp bus",
            9,
        ),
        (
            "range min above max",
            |s| {
                replace(
                    "calibration = { gain = 0.0001 }\n[frame.load]",
                    "calibration = { gain = 0.0001 }\nrange = [5.0, 1.0]\n[frame.load]",
                )(s)
            },
            "frame[0].displacement.range",
            "min < max",
            19,
        ),
        (
            "register past 65535",
            |s| replace("address = 0, type = \"i32\"", "address = 65535, type = \"i32\"")(s),
            "frame[0].displacement.register",
            "runs past register 65535",
            16,
        ),
        ("bad frame id", |s| replace("id = \"F1\"", "id = \"frame one\"")(s), "frame[0].id", "not an id", 12),
        (
            "unknown bus kind",
            |s| replace("kind = \"modbus-rtu\"", "kind = \"can-bus\"")(s),
            "bus[0].kind",
            "unknown variant `can-bus`",
            7,
        ),
        (
            "deflection not increasing",
            |s| format!("{s}[frame.deflection]\nloading = [[0, 0.0], [100, 0.02], [50, 0.03]]\n"),
            "frame[0].deflection.loading",
            "increase strictly",
            23,
        ),
        (
            "webhook without url",
            |s| format!("{s}[[notify.webhook]]\nevents = [\"ready\"]\n"),
            "notify.webhook[0].url",
            "missing `url` (allowed: http://host:port/path)",
            22,
        ),
        (
            "webhook url not http",
            |s| format!("{s}[[notify.webhook]]\nurl = \"ftp://relay/x\"\nevents = [\"ready\"]\n"),
            "notify.webhook[0].url",
            "not an http:// URL (allowed: http://host:port/path",
            23,
        ),
        (
            "webhook url https",
            |s| format!("{s}[[notify.webhook]]\nurl = \"https://hooks.example.invalid/x\"\nevents = [\"ready\"]\n"),
            "notify.webhook[0].url",
            "point the webhook at a relay on this machine",
            23,
        ),
        (
            "webhook url without host",
            |s| format!("{s}[[notify.webhook]]\nurl = \"http://:8400/x\"\nevents = [\"ready\"]\n"),
            "notify.webhook[0].url",
            "missing or malformed host",
            23,
        ),
        (
            "webhook port past 65535",
            |s| format!("{s}[[notify.webhook]]\nurl = \"http://127.0.0.1:70000/x\"\nevents = [\"ready\"]\n"),
            "notify.webhook[0].url",
            "port is not a number from 1 to 65535",
            23,
        ),
        (
            "webhook events empty",
            |s| format!("{s}[[notify.webhook]]\nurl = \"http://127.0.0.1:8400/x\"\nevents = []\n"),
            "notify.webhook[0].events",
            "the list is empty (allowed: one or more of ready, alarm, onset",
            24,
        ),
        (
            "webhook unknown event",
            |s| format!("{s}[[notify.webhook]]\nurl = \"http://127.0.0.1:8400/x\"\nevents = [\"ready\", \"readyy\"]\n"),
            "notify.webhook[0].events",
            "`readyy` is not an event (allowed: ready, alarm, onset, armed, test, bus, reseat, load, note)",
            24,
        ),
        (
            "duplicate webhook url",
            |s| {
                let hook = "[[notify.webhook]]\nurl = \"http://127.0.0.1:8400/x\"\nevents = [\"ready\"]\n";
                format!("{s}{hook}{hook}")
            },
            "notify.webhook[1].url",
            "the same url as notify.webhook[0] (allowed: each url once",
            26,
        ),
        (
            "webhook unknown field",
            |s| {
                format!(
                    "{s}[[notify.webhook]]\nurl = \"http://127.0.0.1:8400/x\"\nevents = [\"ready\"]\nsecret = \"x\"\n"
                )
            },
            "notify.webhook[0].secret",
            "unknown field `secret`",
            25,
        ),
        (
            "webhook timeout zero",
            |s| {
                format!(
                    "{s}[[notify.webhook]]\nurl = \"http://127.0.0.1:8400/x\"\nevents = [\"ready\"]\ntimeout_s = 0\n"
                )
            },
            "notify.webhook[0].timeout_s",
            "allowed 1 to 60 s",
            25,
        ),
    ];
    assert!(cases.len() >= 15);
    let mut failures = Vec::new();
    for (name, change, field, words, line) in cases {
        let text = change(BASE);
        match Config::parse(&text, Purpose::Run) {
            Ok(_) => failures.push(format!("{name}: accepted")),
            Err(error) => {
                let shown = error.to_string();
                let hit = error.problems.iter().find(|p| p.field == field && p.message.contains(words));
                match hit {
                    None => failures.push(format!("{name}: expected field `{field}` with `{words}`, got:\n{shown}")),
                    Some(p) if p.line != line => {
                        failures.push(format!("{name}: line {} (expected {line}): {shown}", p.line))
                    }
                    Some(_) => {}
                }
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

#[test]
fn periods_below_10_ms_are_allowed_where_the_bus_carries_them() {
    // 115 200 baud, one unit: 5.51 ms a round at the least (computed above), so 6 ms fits.
    let rtu = replace("baud = 19200", "baud = 115200")(&replace("unit = 1", "unit = 1\npoll_ms = 6")(BASE));
    let config = Config::parse(&rtu, Purpose::Run).expect("6 ms on a 115 200 baud line with one unit");
    assert_eq!(config.frames[0].poll.steady, Duration::from_millis(6));
    assert_eq!(config.frames[0].poll.fast, Duration::from_millis(6), "fast_poll_ms follows a short poll_ms");
    // Modbus TCP has no line time: down to 1 ms.
    let tcp = replace(
        "kind = \"modbus-rtu\"\ndevice = \"/dev/ttyUSB0\"\nbaud = 19200",
        "kind = \"modbus-tcp\"\naddress = \"127.0.0.1:502\"",
    )(&replace("unit = 1", "unit = 1\npoll_ms = 1")(BASE));
    let config = Config::parse(&tcp, Purpose::Run).expect("1 ms on Modbus TCP");
    assert_eq!(config.frames[0].poll.steady, Duration::from_millis(1));
    // A second unit on the 115 200 baud line doubles the round: 6 ms no longer fits.
    let two =
        format!("{rtu}{}", rtu[rtu.find("[[frame]]").unwrap()..].replace("F1", "F2").replace("unit = 1", "unit = 2"));
    let problems = Config::parse(&two, Purpose::Run).expect_err("two units in 6 ms at 115 200 baud").problems;
    assert!(
        problems.iter().any(|p| p.field == "frame[0].poll_ms" && p.message.contains("its 2 unit(s)")),
        "{problems:?}"
    );
    assert!(problems.iter().any(|p| p.field == "frame[1].poll_ms"), "{problems:?}");
}

#[test]
fn every_problem_in_a_file_is_reported_at_once() {
    let text = BASE.replace("baud = 19200", "baud = 7").replace("unit = 1", "unit = 0");
    let error = Config::parse(&text, Purpose::Run).unwrap_err();
    let fields: Vec<&str> = error.problems.iter().map(|p| p.field.as_str()).collect();
    assert_eq!(fields, vec!["bus[0].baud", "frame[0].unit"]);
}

#[test]
fn demo_purpose_needs_neither_store_nor_frames() {
    let config = Config::parse("[http]\nlisten = \"127.0.0.1:0\"\n", Purpose::Demo).unwrap();
    assert!(config.store.is_none());
    assert!(Config::parse("[http]\nlisten = \"127.0.0.1:0\"\n", Purpose::Run).is_err());
}

#[test]
fn http_users_are_read_with_their_roles() {
    let text = format!(
        "{BASE}\n[http]\nlisten = \"0.0.0.0:8321\"\n[[http.user]]\nname = \"olga\"\nrole = \"operator\"\ntoken = \"0123456789abcdef\"\n\
         [[http.user]]\nname = \"vera\"\nrole = \"viewer\"\ntoken = \"fedcba9876543210\"\n"
    );
    let config = Config::parse(&text, Purpose::Run).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(config.http.users.len(), 2);
    assert_eq!((config.http.users[0].name.as_str(), config.http.users[0].role), ("olga", Role::Operator));
    assert_eq!(config.http.users[1].role, Role::Viewer);
    assert!(!format!("{:?}", config.http.users[0]).contains("0123456789abcdef"), "Debug hides the token");
}

#[test]
fn bad_http_users_and_an_open_address_without_users_are_refused_at_their_line() {
    let head = format!("{BASE}\n[http]\n");
    let base_lines = head.lines().count();
    let user = |name: &str, role: &str, token: &str| {
        format!("[[http.user]]\nname = \"{name}\"\nrole = \"{role}\"\ntoken = \"{token}\"\n")
    };
    // (what, text after [http], field, words in the message, line relative to the [http] header)
    let cases: Vec<(&str, String, &str, &str, usize)> = vec![
        ("short token", user("olga", "operator", "short"), "http.user[0].token", "at least 16", 4),
        ("unknown role", user("olga", "admin", "0123456789abcdef"), "http.user[0].role", "viewer, operator", 3),
        (
            "duplicate name",
            user("olga", "operator", "0123456789abcdef") + &user("olga", "viewer", "fedcba9876543210"),
            "http.user[1].name",
            "twice",
            6,
        ),
        ("colon in a name", user("ol:ga", "viewer", "0123456789abcdef"), "http.user[0].name", "no `:`", 2),
        (
            "two users sharing a token",
            user("vera", "viewer", "0123456789abcdef") + &user("olga", "operator", "0123456789abcdef"),
            "http.user[1].token",
            "the same token as user `vera`",
            8,
        ),
        ("non-ASCII token", user("olga", "operator", "0123456789abcdéf"), "http.user[0].token", "outside ASCII", 4),
        ("open without users", "listen = \"0.0.0.0:8321\"\n".into(), "http.listen", "[[http.user]]", 1),
    ];
    for (what, tail, field, words, line) in cases {
        let error = Config::parse(&format!("{head}{tail}"), Purpose::Run).expect_err(what);
        let problem = error.problems.iter().find(|p| p.field == field).unwrap_or_else(|| panic!("{what}: {error}"));
        assert!(problem.message.contains(words), "{what}: {}", problem.message);
        assert_eq!(problem.line, base_lines + line, "{what}: {problem}");
        assert!(!problem.message.contains("0123456789abcdef"), "tokens are never echoed");
    }
    let loopback = format!("{head}listen = \"[::1]:8321\"\n");
    assert!(Config::parse(&loopback, Purpose::Run).is_ok(), "loopback needs no users");
}

#[test]
fn notify_webhooks_are_read_with_their_events_and_defaults_in_run_and_demo_files() {
    let hooks = "[[notify.webhook]]\nurl = \"http://127.0.0.1:8400/lab?token=s3cret\"\nevents = [\"ready\", \"alarm\"]\n\n\
                 [[notify.webhook]]\nurl = \"http://[::1]:9000\"\nevents = [\"bus\"]\ntimeout_s = 3\n";
    let config = Config::parse(&format!("{BASE}{hooks}"), Purpose::Run).unwrap_or_else(|e| panic!("{e}"));
    let [first, second] = config.notify.webhooks.as_slice() else { panic!("{:?}", config.notify) };
    assert_eq!(first.events, vec![NotifyEvent::Ready, NotifyEvent::Alarm]);
    assert_eq!(first.timeout, Duration::from_secs(WEBHOOK_TIMEOUT_S));
    assert_eq!(
        (first.url.host(), first.url.port(), first.url.path_and_query()),
        ("127.0.0.1", 8400, "/lab?token=s3cret")
    );
    assert_eq!(first.url.redacted(), "http://127.0.0.1:8400/lab");
    assert!(!format!("{config:?}").contains("s3cret"), "Debug leaves the query out");
    assert!(
        !config.summary().contains("s3cret")
            && config.summary().contains("webhook http://127.0.0.1:8400/lab: ready, alarm")
    );
    assert_eq!((second.url.host(), second.url.port(), second.url.path_and_query()), ("::1", 9000, "/"));
    assert_eq!(second.url.authority(), "[::1]:9000");
    assert_eq!(second.timeout, Duration::from_secs(3));
    let demo = Config::parse(&format!("[http]\nlisten = \"127.0.0.1:0\"\n{hooks}"), Purpose::Demo).unwrap();
    assert_eq!(demo.notify, config.notify, "the demo keeps the same webhooks");
    assert!(Config::parse(BASE, Purpose::Run).unwrap().notify.webhooks.is_empty());
}

#[test]
fn webhook_urls_default_to_port_80_and_path_slash_and_name_the_journal_kinds_of_each_event() {
    let url = WebhookUrl::parse("HTTP://relay.lab.local?k=1").unwrap();
    assert_eq!((url.host(), url.port(), url.path_and_query()), ("relay.lab.local", 80, "/?k=1"));
    assert_eq!(url.redacted(), "http://relay.lab.local/");
    for bad in ["http://relay/#frag", "http://user@relay/x", "http://re lay/x", "http://[::1/x", "http://a:b:c/x"] {
        assert!(WebhookUrl::parse(bad).is_err(), "{bad} accepted");
    }
    // Each journal kind belongs to at most one name, so a body's `event` is unambiguous.
    let mut kinds: Vec<&str> = NotifyEvent::ALL.iter().flat_map(|e| e.kinds()).map(EventKind::name).collect();
    let all = kinds.len();
    kinds.sort_unstable();
    kinds.dedup();
    assert_eq!(kinds.len(), all);
    assert_eq!(NotifyEvent::of_kind(EventKind::AlarmCleared), Some(NotifyEvent::Alarm));
    // The journal kinds behind each name, as webhooks have always been sent them.
    let expected: [(NotifyEvent, &[&str]); 9] = [
        (NotifyEvent::Ready, &["ready"]),
        (NotifyEvent::Alarm, &["alarm-raised", "alarm-acknowledged", "alarm-cleared"]),
        (NotifyEvent::Onset, &["onset"]),
        (NotifyEvent::Armed, &["armed", "step-withdrawn"]),
        (
            NotifyEvent::Test,
            &[
                "test-started",
                "test-finished",
                "test-resumed",
                "step-voided",
                "step-restored",
                "revised",
                "revision-withdrawn",
                "approved",
                "approval-withdrawn",
            ],
        ),
        (NotifyEvent::Bus, &["bus-down", "bus-up"]),
        (NotifyEvent::Reseat, &["reseat-proposed", "reseat-resolved"]),
        (NotifyEvent::Load, &["load-off", "load-back", "load-change-unarmed"]),
        (NotifyEvent::Note, &["note"]),
    ];
    for (event, names) in expected {
        let mut got: Vec<&str> = event.kinds().into_iter().map(EventKind::name).collect();
        let mut want = names.to_vec();
        got.sort_unstable();
        want.sort_unstable();
        assert_eq!(got, want, "{}", event.name());
    }
    assert!(NotifyEvent::ALL.iter().all(|e| NotifyEvent::from_name(e.name()) == Some(*e)));
}

#[test]
fn the_sample_webhook_example_is_valid_once_uncommented() {
    let start = SAMPLE.find("# [[notify.webhook]]").expect("the sample shows a webhook");
    let mut text = SAMPLE[..start].to_string();
    for line in SAMPLE[start..].lines() {
        text += line.strip_prefix("# ").filter(|l| l.starts_with('[') || l.contains(" = ")).unwrap_or(line);
        text += "\n";
    }
    let config = Config::parse(&text, Purpose::Run).unwrap_or_else(|e| panic!("{e}\n{text}"));
    assert_eq!(config.notify.webhooks.len(), 1);
    assert_eq!(config.notify.webhooks[0].events, vec![NotifyEvent::Ready, NotifyEvent::Alarm]);
    assert!(Config::parse(SAMPLE, Purpose::Run).unwrap().notify.webhooks.is_empty(), "commented out in the sample");
}

#[test]
fn public_origins_are_scheme_host_and_port_only_and_refused_at_their_line() {
    let head = format!("{BASE}\n[http]\n");
    let base_lines = head.lines().count();
    let ok = format!(
        "{head}public_origins = [\"https://Lab.Example.org\", \"http://10.1.2.3:8080/\", \"http://[::1]:9\"]\n"
    );
    let config = Config::parse(&ok, Purpose::Run).unwrap_or_else(|e| panic!("{e}"));
    let shown: Vec<String> = config.http.public_origins.iter().map(|o| o.to_string()).collect();
    assert_eq!(shown, ["https://lab.example.org", "http://10.1.2.3:8080", "http://[::1]:9"]);
    assert_eq!(config.http.public_origins[0].port, 443);
    for (bad, words) in [
        ("lab.example.org", "no scheme"),
        ("ftp://lab.example.org", "scheme `ftp`"),
        ("https://lab.example.org/oedolog", "path"),
        ("https://user@lab.example.org", "path, query or user"),
        ("https://", "no valid host"),
        ("https://lab.example.org:99999", "port `99999`"),
        ("https://lab example.org", "no valid host"),
    ] {
        let text = format!("{head}public_origins = [\n  \"https://fine.example.org\",\n  \"{bad}\",\n]\n");
        let error = Config::parse(&text, Purpose::Run).expect_err(bad);
        let problem = error
            .problems
            .iter()
            .find(|p| p.field == "http.public_origins[1]")
            .unwrap_or_else(|| panic!("{bad}: {error}"));
        assert!(
            problem.message.contains(words) && problem.message.contains("scheme://host[:port]"),
            "{bad}: {problem}"
        );
        assert_eq!(problem.line, base_lines + 3, "{bad}: {problem}");
    }
}

#[test]
fn implausible_rings_and_overlapping_registers_are_refused_naming_the_frame_s_index() {
    let second = "\n[[frame]]\nid = \"F2\"\nbus = \"line-a\"\nunit = 2\nring_diameter_mm = 63.5\n\
                  [frame.displacement]\nregister = { table = \"input\", address = 0, type = \"i32\" }\n\
                  [frame.load]\nregister = { table = \"input\", address = 2, type = \"i32\" }\n";
    let cases: Vec<(&str, String, &str, &str)> = vec![
        (
            "a ring of 0.001 mm",
            BASE.replacen("ring_diameter_mm = 63.5", "ring_diameter_mm = 0.001", 1),
            "frame[0].ring_diameter_mm",
            "allowed 20 to 200 mm",
        ),
        (
            "a ring area of 3 mm²",
            BASE.replacen("ring_diameter_mm = 63.5", "ring_area_mm2 = 3.0", 1),
            "frame[0].ring_area_mm2",
            "allowed 314 to 31416 mm²",
        ),
        (
            "the load cell on the gauge's second word",
            BASE.replacen("address = 2, type = \"i32\"", "address = 1, type = \"i32\"", 1),
            "frame[0].load.register",
            "input registers 1–2 overlap the displacement's 0–1",
        ),
        (
            "a type error in the second frame",
            format!("{BASE}{second}").replacen("unit = 2", "unit = 2\npoll_ms = \"fast\"", 1),
            "frame[1].poll_ms",
            "invalid type",
        ),
    ];
    for (what, text, field, words) in cases {
        let error = Config::parse(&text, Purpose::Run).expect_err(what);
        let problem = error.problems.iter().find(|p| p.field == field).unwrap_or_else(|| panic!("{what}: {error}"));
        assert!(problem.message.contains(words), "{what}: {}", problem.message);
    }
    // The same addresses in the other table do not overlap, and the second frame's maps are its own.
    let other_table = BASE.replacen("table = \"input\", address = 2", "table = \"holding\", address = 0", 1);
    assert!(Config::parse(&other_table, Purpose::Run).is_ok());
    assert!(Config::parse(&format!("{BASE}{second}"), Purpose::Run).is_ok());
}

#[test]
fn display_units_are_chosen_by_name_and_an_unknown_one_is_refused_with_the_list() {
    let config = Config::parse(
        &format!("{BASE}\n[display]\nstress = \"tsf\"\nlength = \"in\"\ncv = \"m2/year\"\nk = \"cm/s\"\n"),
        Purpose::Run,
    )
    .unwrap_or_else(|e| panic!("{e}"));
    let d = config.display;
    assert_eq!([d.stress.name, d.length.name, d.cv.name, d.k.name], ["tsf", "in", "m²/year", "cm/s"]);
    assert_eq!(Config::parse(BASE, Purpose::Run).unwrap().display, oedolog_core::units::DisplayUnits::default());
    let error = Config::parse(&format!("{BASE}\n[display]\nstress = \"MPa\"\n"), Purpose::Run).unwrap_err();
    let problem = error.problems.iter().find(|p| p.field == "display.stress").unwrap_or_else(|| panic!("{error}"));
    assert!(problem.message.contains("allowed: kPa, tsf, psf"), "{problem}");
    let error = Config::parse(&format!("{BASE}\n[display]\ntemperature = \"F\"\n"), Purpose::Run).unwrap_err();
    assert!(error.to_string().contains("unknown field `temperature`"), "{error}");
}

/// `[[publish.mqtt]]` appended to BASE: the first problem's field, line and message.
fn publish_problem(table: &str) -> ConfigProblem {
    let text = format!("{BASE}[[publish.mqtt]]\n{table}");
    let error = Config::parse(&text, Purpose::Run).expect_err("must be refused");
    error.problems[0].clone()
}

#[test]
fn a_publish_table_is_checked_whole_and_each_bad_value_is_refused_at_its_line_and_field() {
    let dir = tempfile::tempdir().unwrap();
    let password = dir.path().join("pw");
    std::fs::write(&password, "s3cret\n").unwrap();
    let good = format!(
        "url = \"mqtt://broker.lab:1884\"\nclient_id = \"labA\"\ntopic_prefix = \"geo/soil\"\nlab = \"lab-a\"\nusername = \"u\"\npassword_file = \"{}\"\n",
        password.display()
    );
    let config =
        Config::parse(&format!("{BASE}[[publish.mqtt]]\n{good}"), Purpose::Run).unwrap_or_else(|e| panic!("{e}"));
    let b = &config.publish.mqtt[0];
    assert_eq!((b.url.host.as_str(), b.url.port, b.url.tls), ("broker.lab", 1884, false));
    assert_eq!(b.lab_topic(), "geo/soil/lab-a");
    assert_eq!(b.credentials, Some(("u".into(), Some(Secret("s3cret".into())))));
    assert_eq!((b.qos, b.lag_alarm), (1, Duration::from_secs(300)));
    assert!(!format!("{b:?}").contains("s3cret"), "the password is never printed");
    let first = BASE.lines().count() + 2;
    let base = "client_id = \"labA\"\ntopic_prefix = \"soil\"\nlab = \"lab-a\"\n";
    let cases: Vec<(String, &str, &str, usize)> = vec![
        (format!("url = \"http://broker\"\n{base}"), "publish.mqtt[0].url", "not an MQTT URL", first),
        (format!("url = \"mqtt://broker:99999\"\n{base}"), "publish.mqtt[0].url", "not a port", first),
        (format!("url = \"mqtt://u:p@broker\"\n{base}"), "publish.mqtt[0].url", "password_file", first),
        (
            "url = \"mqtt://b\"\nclient_id = \"labA\"\ntopic_prefix = \"soil/+\"\nlab = \"a\"\n".into(),
            "publish.mqtt[0].topic_prefix",
            "wildcard",
            first + 2,
        ),
        (
            "url = \"mqtt://b\"\nclient_id = \"labA\"\ntopic_prefix = \"soil/#\"\nlab = \"a\"\n".into(),
            "publish.mqtt[0].topic_prefix",
            "wildcard",
            first + 2,
        ),
        (
            "url = \"mqtt://b\"\nclient_id = \"labA\"\ntopic_prefix = \"$SYS\"\nlab = \"a\"\n".into(),
            "publish.mqtt[0].topic_prefix",
            "belong to the broker",
            first + 2,
        ),
        (
            "url = \"mqtt://b\"\nclient_id = \"labA\"\ntopic_prefix = \"soil//x\"\nlab = \"a\"\n".into(),
            "publish.mqtt[0].topic_prefix",
            "empty level",
            first + 2,
        ),
        (
            "url = \"mqtt://b\"\nclient_id = \"labA\"\ntopic_prefix = \"soil\"\nlab = \"a/b\"\n".into(),
            "publish.mqtt[0].lab",
            "not a lab name",
            first + 3,
        ),
        (
            "url = \"mqtt://b\"\nclient_id = \"lab-a\"\ntopic_prefix = \"soil\"\nlab = \"a\"\n".into(),
            "publish.mqtt[0].client_id",
            "1–23 letters and digits",
            first + 1,
        ),
        (
            format!("url = \"mqtt://b\"\n{base}username = \"u\"\npassword_file = \"/nonexistent/pw\"\n"),
            "publish.mqtt[0].password_file",
            "cannot read `/nonexistent/pw`",
            first + 5,
        ),
        (
            format!("url = \"mqtt://b\"\n{base}password_file = \"{}\"\n", password.display()),
            "publish.mqtt[0].password_file",
            "needs `username`",
            first + 4,
        ),
        (format!("url = \"mqtts://b\"\n{base}"), "publish.mqtt[0].ca_file", "needs `ca_file`", first),
        (
            format!("url = \"mqtts://b\"\n{base}ca_file = \"{}\"\n", password.display()),
            "publish.mqtt[0].ca_file",
            "no PEM certificate",
            first + 4,
        ),
        (format!("url = \"mqtt://b\"\n{base}qos = 2\n"), "publish.mqtt[0].qos", "allowed 0 or 1", first + 4),
        (
            format!("url = \"mqtt://b\"\n{base}lag_alarm_s = 1\n"),
            "publish.mqtt[0].lag_alarm_s",
            "10 to 86400",
            first + 4,
        ),
        (format!("url = \"mqtt://b\"\n{base}colour = 1\n"), "publish.mqtt", "unknown field `colour`", first + 4),
    ];
    for (table, field, message, line) in cases {
        let p = publish_problem(&table);
        assert!(p.field.starts_with(field), "{table}: field {} ≠ {field} ({p})", p.field);
        assert!(p.message.contains(message), "{table}: {p}");
        assert_eq!(p.line, line, "{table}: {p}");
    }
    // The same broker and client id twice: one of the two would be dropped by the broker.
    let twice =
        format!("{BASE}[[publish.mqtt]]\nurl = \"mqtt://b\"\n{base}[[publish.mqtt]]\nurl = \"mqtt://b\"\n{base}");
    let error = Config::parse(&twice, Purpose::Run).unwrap_err();
    assert!(error.to_string().contains("publish.mqtt[1].client_id: the same url and client_id"), "{error}");
}

const FLEET: &str =
    "[fleet]\n[[fleet.broker]]\nurl = \"mqtt://broker\"\nclient_id = \"board1\"\ntopic_prefix = \"soil-labs\"\n";

#[test]
fn a_fleet_file_is_read_with_its_brokers_and_check_config_tells_it_from_a_lab_s_file() {
    assert_eq!(Purpose::of_text(FLEET), Purpose::Fleet);
    assert_eq!(Purpose::of_text(BASE), Purpose::Run);
    let c = Config::parse(FLEET, Purpose::Fleet).unwrap_or_else(|e| panic!("{e}"));
    let fleet = c.fleet.unwrap();
    assert_eq!(fleet.quiet_after, Duration::from_secs(300));
    assert_eq!((fleet.brokers[0].url.port, fleet.brokers[0].topic_prefix.as_str()), (1883, "soil-labs"));
    let c = Config::parse(&format!("{FLEET}[http]\nlisten = \"127.0.0.1:0\"\n"), Purpose::Fleet).unwrap();
    assert_eq!(c.http.listen.port(), 0);
}

#[test]
fn bad_fleet_files_are_refused_at_the_line_and_field() {
    let first = |text: &str, purpose| Config::parse(text, purpose).unwrap_err().problems[0].clone();
    let cases: [(String, &str, &str, usize); 9] = [
        ("[fleet]\nquiet_after_s = 60\n".into(), "fleet.broker", "at least one broker", 1),
        (FLEET.replace("[fleet]\n", "[fleet]\nquiet_after_s = 5\n"), "fleet.quiet_after_s", "allowed 20 to 86400", 2),
        (FLEET.replace("mqtt://broker", "http://broker"), "fleet.broker[0].url", "not an MQTT URL", 3),
        (FLEET.replace("soil-labs", "soil/#"), "fleet.broker[0].topic_prefix", "wildcard", 5),
        (FLEET.replace("board1", "board-1"), "fleet.broker[0].client_id", "1–23 letters", 4),
        (format!("{FLEET}lab = \"x\"\n"), "fleet.broker[0].lab", "only for [[publish.mqtt]]", 6),
        (
            format!("{FLEET}password_file = \"/nonexistent/pw\"\nusername = \"u\"\n"),
            "fleet.broker[0].password_file",
            "cannot read",
            6,
        ),
        (FLEET.replace("mqtt://", "mqtts://"), "fleet.broker[0].ca_file", "needs `ca_file`", 3),
        (
            format!("{FLEET}[[fleet.broker]]\nurl = \"mqtt://broker\"\nclient_id = \"board1\"\ntopic_prefix = \"b\"\n"),
            "fleet.broker[1].client_id",
            "same url and client_id",
            8,
        ),
    ];
    for (text, field, message, line) in cases {
        let p = first(&text, Purpose::Fleet);
        assert_eq!((p.field.as_str(), p.line), (field, line), "{text}\n{p}");
        assert!(p.message.contains(message), "{p}");
    }
    // A fleet file holds no lab, and a lab's file no [fleet].
    assert_eq!(first(&format!("{FLEET}{BASE}"), Purpose::Fleet).field, "store");
    assert_eq!(first(&format!("{BASE}{FLEET}"), Purpose::Run).field, "fleet");
    let fields: Vec<String> =
        Config::parse(BASE, Purpose::Fleet).unwrap_err().problems.into_iter().map(|p| p.field).collect();
    assert_eq!(fields, ["store", "fleet", "frame", "bus"]);
}
