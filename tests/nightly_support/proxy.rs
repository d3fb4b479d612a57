//! A TCP relay of the tests' own between geofold and the test server
//! (loopback only), reading the PostgreSQL wire protocol's message framing
//! (PostgreSQL documentation, "Frontend/Backend Protocol", "Message
//! Formats") to cut or hold connections at exact points.

use std::io::{Read, Write};
use std::net::{Shutdown, TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Condvar, Mutex};
use std::thread;
use std::time::{Duration, Instant};

use super::uri_via;
use crate::common::db_uri;

/// Where the proxy acts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Point {
    /// The first CopyData ('d') the server sends: the source is being read.
    Read,
    /// The first CopyData the client sends: result rows are being loaded.
    CopyIn,
    /// A Query ('Q') "COMMIT" from a client that sent CopyDone ('c') before.
    Commit,
}

/// What the proxy does there.
#[derive(Debug, Clone, Copy)]
pub enum Action {
    /// Shut every connection down and refuse connections for this long.
    Cut(Duration),
    /// Hold the message (and everything after it on that connection) until [`Proxy::release`].
    Pause,
}

struct Shared {
    upstream: u16,
    sockets: Mutex<Vec<TcpStream>>,
    armed: Mutex<Option<(Point, Action)>>,
    fired: AtomicBool,
    down_until: Mutex<Option<Instant>>,
    paused: (Mutex<bool>, Condvar),
    stop: AtomicBool,
}

/// A TCP relay on 127.0.0.1 in front of the test server.
pub struct Proxy {
    port: u16,
    shared: Arc<Shared>,
    accept: Option<thread::JoinHandle<()>>,
}

impl Proxy {
    pub fn start() -> Proxy {
        let upstream = db_uri()
            .rsplit_once(':')
            .and_then(|(_, rest)| rest.split('/').next())
            .and_then(|p| p.parse().ok())
            .expect("a port in GEOFOLD_TEST_DB");
        let listener = TcpListener::bind("127.0.0.1:0").expect("bind the proxy");
        let port = listener.local_addr().expect("proxy address").port();
        let shared = Arc::new(Shared {
            upstream,
            sockets: Mutex::new(Vec::new()),
            armed: Mutex::new(None),
            fired: AtomicBool::new(false),
            down_until: Mutex::new(None),
            paused: (Mutex::new(false), Condvar::new()),
            stop: AtomicBool::new(false),
        });
        let accept = {
            let shared = Arc::clone(&shared);
            thread::spawn(move || accept_loop(listener, port, &shared))
        };
        Proxy {
            port,
            shared,
            accept: Some(accept),
        }
    }

    pub fn arm(&self, point: Point, action: Action) {
        self.shared.fired.store(false, Ordering::SeqCst);
        *self.shared.armed.lock().unwrap() = Some((point, action));
    }

    pub fn fired(&self) -> bool {
        self.shared.fired.load(Ordering::SeqCst)
    }

    pub fn release(&self) {
        let (lock, wake) = &self.shared.paused;
        *lock.lock().unwrap() = false;
        wake.notify_all();
    }

    pub fn uri(&self) -> String {
        uri_via(self.port)
    }
}

impl Drop for Proxy {
    fn drop(&mut self) {
        self.release();
        self.shared.stop.store(true, Ordering::SeqCst);
        cut_all(&self.shared);
        if let Some(accept) = self.accept.take() {
            let _ = accept.join();
        }
    }
}

fn cut_all(shared: &Shared) {
    for socket in shared.sockets.lock().unwrap().drain(..) {
        let _ = socket.shutdown(Shutdown::Both);
    }
}

/// Accepts clients; while "down", closes the port so connecting is refused
/// (as for a server that is not up), then listens on it again.
fn accept_loop(listener: TcpListener, port: u16, shared: &Arc<Shared>) {
    let mut listener = Some(listener);
    while !shared.stop.load(Ordering::SeqCst) {
        let down = shared
            .down_until
            .lock()
            .unwrap()
            .is_some_and(|until| Instant::now() < until);
        if down {
            listener = None;
            thread::sleep(Duration::from_millis(10));
            continue;
        }
        let active = match &listener {
            Some(active) => active,
            None => match TcpListener::bind(("127.0.0.1", port)) {
                Ok(bound) => listener.insert(bound),
                Err(_) => {
                    thread::sleep(Duration::from_millis(10));
                    continue;
                }
            },
        };
        active.set_nonblocking(true).unwrap();
        match active.accept() {
            Ok((client, _)) => {
                client.set_nonblocking(false).unwrap();
                let server =
                    TcpStream::connect(("127.0.0.1", shared.upstream)).expect("reach the server");
                {
                    let mut sockets = shared.sockets.lock().unwrap();
                    sockets.push(client.try_clone().unwrap());
                    sockets.push(server.try_clone().unwrap());
                }
                let copied = Arc::new(AtomicBool::new(false));
                for (from, to, from_client) in [
                    (
                        client.try_clone().unwrap(),
                        server.try_clone().unwrap(),
                        true,
                    ),
                    (server, client, false),
                ] {
                    let shared = Arc::clone(shared);
                    let copied = Arc::clone(&copied);
                    thread::spawn(move || relay(from, to, from_client, &shared, &copied));
                }
            }
            Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                thread::sleep(Duration::from_millis(5))
            }
            Err(_) => thread::sleep(Duration::from_millis(5)),
        }
    }
}

/// Reads exactly `n` bytes, or None at the end of the stream.
fn read_exact(from: &mut TcpStream, n: usize) -> Option<Vec<u8>> {
    let mut buffer = vec![0; n];
    from.read_exact(&mut buffer).ok().map(|()| buffer)
}

/// Relays one direction message by message, acting at the armed point.
fn relay(
    mut from: TcpStream,
    mut to: TcpStream,
    from_client: bool,
    shared: &Shared,
    copied: &AtomicBool,
) {
    let mut startup = from_client;
    loop {
        // The startup message has no type byte; every other message has one.
        let kind = if startup {
            None
        } else {
            read_exact(&mut from, 1).map(|b| b[0])
        };
        if !startup && kind.is_none() {
            break;
        }
        let Some(length) = read_exact(&mut from, 4) else {
            break;
        };
        let size = u32::from_be_bytes([length[0], length[1], length[2], length[3]]) as usize;
        let Some(body) = read_exact(&mut from, size.saturating_sub(4)) else {
            break;
        };
        startup = false;
        let point = match (from_client, kind) {
            (false, Some(b'd')) => Some(Point::Read),
            (true, Some(b'd')) => {
                copied.store(true, Ordering::SeqCst);
                Some(Point::CopyIn)
            }
            (true, Some(b'Q'))
                if copied.load(Ordering::SeqCst) && body.starts_with(b"COMMIT\0") =>
            {
                Some(Point::Commit)
            }
            _ => None,
        };
        let action = {
            let mut armed = shared.armed.lock().unwrap();
            match (*armed, point) {
                (Some((at, action)), Some(here)) if at == here => {
                    *armed = None;
                    Some(action)
                }
                _ => None,
            }
        };
        match action {
            Some(Action::Cut(down_for)) => {
                *shared.down_until.lock().unwrap() = Some(Instant::now() + down_for);
                shared.fired.store(true, Ordering::SeqCst);
                cut_all(shared);
                return;
            }
            Some(Action::Pause) => {
                let (lock, wake) = &shared.paused;
                let mut paused = lock.lock().unwrap();
                *paused = true;
                shared.fired.store(true, Ordering::SeqCst);
                while *paused && !shared.stop.load(Ordering::SeqCst) {
                    paused = wake
                        .wait_timeout(paused, Duration::from_millis(50))
                        .unwrap()
                        .0;
                }
            }
            None => {}
        }
        let mut message = Vec::with_capacity(5 + body.len());
        message.extend(kind);
        message.extend_from_slice(&length);
        message.extend_from_slice(&body);
        if to.write_all(&message).is_err() {
            break;
        }
    }
    let _ = to.shutdown(Shutdown::Write);
}
