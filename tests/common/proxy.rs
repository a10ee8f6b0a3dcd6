//! A TCP proxy in front of the test PostgreSQL server that a test can pause (bytes stop moving
//! both ways while TCP stays up, as with a stopped server process or a silent partition) or have
//! cut a connection at its next commit, before or after passing the commit on.

use std::io::{Read, Write};
use std::net::{Shutdown, TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, AtomicU8, Ordering};
use std::sync::Arc;
use std::time::Duration;

/// What happens at the next `COMMIT` a client sends.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AtCommit {
    Pass = 0,
    /// Drop the connection without passing the commit on: nothing is committed.
    CutBefore = 1,
    /// Pass the commit on, let the server commit, then drop the connection: the answer is lost.
    CutAfter = 2,
}

pub struct Proxy {
    pub port: u16,
    paused: Arc<AtomicBool>,
    at_commit: Arc<AtomicU8>,
}

impl Proxy {
    /// Listens on a free loopback port and forwards to `target` (host:port).
    pub fn start(target: &str) -> Proxy {
        let listener = TcpListener::bind("127.0.0.1:0").unwrap();
        let port = listener.local_addr().unwrap().port();
        let paused = Arc::new(AtomicBool::new(false));
        let at_commit = Arc::new(AtomicU8::new(AtCommit::Pass as u8));
        let (p, a, target) = (paused.clone(), at_commit.clone(), target.to_string());
        std::thread::spawn(move || {
            for client in listener.incoming().flatten() {
                let Ok(server) = TcpStream::connect(&target) else {
                    continue;
                };
                let (c2, s2) = (client.try_clone().unwrap(), server.try_clone().unwrap());
                let (pa, pb, ac) = (p.clone(), p.clone(), a.clone());
                // Set when the server's answers to this client are to be lost.
                let mute = Arc::new(AtomicBool::new(false));
                let m2 = mute.clone();
                std::thread::spawn(move || pump(client, server, pa, Some((ac, mute))));
                std::thread::spawn(move || pump_answers(s2, c2, pb, m2));
            }
        });
        Proxy {
            port,
            paused,
            at_commit,
        }
    }

    pub fn pause(&self, on: bool) {
        self.paused.store(on, Ordering::SeqCst);
    }

    pub fn at_next_commit(&self, what: AtCommit) {
        self.at_commit.store(what as u8, Ordering::SeqCst);
    }
}

/// Copies the server's answers to the client while not paused, unless muted.
fn pump_answers(
    mut from: TcpStream,
    mut to: TcpStream,
    paused: Arc<AtomicBool>,
    mute: Arc<AtomicBool>,
) {
    let mut buf = [0u8; 16 * 1024];
    while let Ok(n @ 1..) = from.read(&mut buf) {
        while paused.load(Ordering::SeqCst) {
            std::thread::sleep(Duration::from_millis(10));
        }
        if mute.load(Ordering::SeqCst) || to.write_all(&buf[..n]).is_err() {
            break;
        }
    }
    let _ = from.shutdown(Shutdown::Both);
    let _ = to.shutdown(Shutdown::Both);
}

/// Copies the client's messages to the server while not paused, watching for a commit.
fn pump(
    mut from: TcpStream,
    mut to: TcpStream,
    paused: Arc<AtomicBool>,
    at_commit: Option<(Arc<AtomicU8>, Arc<AtomicBool>)>,
) {
    let mut buf = [0u8; 16 * 1024];
    loop {
        let n = match from.read(&mut buf) {
            Ok(0) | Err(_) => break,
            Ok(n) => n,
        };
        // Held while paused: what was read is passed on only once resumed.
        while paused.load(Ordering::SeqCst) {
            std::thread::sleep(Duration::from_millis(10));
        }
        let chunk = &buf[..n];
        let is_commit = chunk.windows(7).any(|w| w == b"COMMIT\0");
        let action = match (&at_commit, is_commit) {
            (Some((a, _)), true) => a.swap(AtCommit::Pass as u8, Ordering::SeqCst),
            _ => AtCommit::Pass as u8,
        };
        if action == AtCommit::CutBefore as u8 {
            break;
        }
        if let (Some((_, mute)), true) = (&at_commit, action == AtCommit::CutAfter as u8) {
            mute.store(true, Ordering::SeqCst);
        }
        if to.write_all(chunk).is_err() {
            break;
        }
        if action == AtCommit::CutAfter as u8 {
            std::thread::sleep(Duration::from_millis(300));
            break;
        }
    }
    let _ = from.shutdown(Shutdown::Both);
    let _ = to.shutdown(Shutdown::Both);
}
