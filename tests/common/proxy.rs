//! A TCP relay between the daemon and the broker, for outages that only
//! the daemon sees: the broker and the test's subscriber stay up while
//! [`Proxy::down`] cuts the daemon off (its connections reset, new ones
//! closed at once) and [`Proxy::up`] lets it back.

use std::io::{Read, Write};
use std::net::{Shutdown, TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};

pub struct Proxy {
    pub port: u16,
    up: Arc<AtomicBool>,
    conns: Arc<Mutex<Vec<TcpStream>>>,
}

impl Proxy {
    /// Listens on a free loopback port and relays to `target`.
    pub fn start(target: u16) -> Proxy {
        let listener = TcpListener::bind(("127.0.0.1", 0)).unwrap();
        let port = listener.local_addr().unwrap().port();
        let up = Arc::new(AtomicBool::new(true));
        let conns: Arc<Mutex<Vec<TcpStream>>> = Arc::default();
        {
            let up = up.clone();
            let conns = conns.clone();
            std::thread::spawn(move || {
                for client in listener.incoming() {
                    let Ok(client) = client else { continue };
                    if !up.load(Ordering::SeqCst) {
                        let _ = client.shutdown(Shutdown::Both);
                        continue;
                    }
                    let Ok(server) = TcpStream::connect(("127.0.0.1", target)) else {
                        let _ = client.shutdown(Shutdown::Both);
                        continue;
                    };
                    let mut list = conns.lock().unwrap();
                    for s in [&client, &server] {
                        if let Ok(c) = s.try_clone() {
                            list.push(c);
                        }
                    }
                    drop(list);
                    relay(client.try_clone().unwrap(), server.try_clone().unwrap());
                    relay(server, client);
                }
            });
        }
        Proxy { port, up, conns }
    }

    /// Cuts every connection and refuses new ones.
    pub fn down(&self) {
        self.up.store(false, Ordering::SeqCst);
        for c in self.conns.lock().unwrap().drain(..) {
            let _ = c.shutdown(Shutdown::Both);
        }
    }

    pub fn up(&self) {
        self.up.store(true, Ordering::SeqCst);
    }
}

fn relay(mut from: TcpStream, mut to: TcpStream) {
    std::thread::spawn(move || {
        let mut buf = [0u8; 16 * 1024];
        loop {
            match from.read(&mut buf) {
                Ok(0) | Err(_) => break,
                Ok(n) => {
                    if to.write_all(&buf[..n]).is_err() {
                        break;
                    }
                }
            }
        }
        let _ = to.shutdown(Shutdown::Both);
        let _ = from.shutdown(Shutdown::Both);
    });
}
