//! A pseudo-terminal pair standing in for a serial line: the simulator (or a
//! test) writes to the master; the daemon opens the slave path as its port.
//! Safe calls of `nix` only: no `unsafe` in this crate.

use std::fs::File;
use std::io;
use std::os::fd::AsFd;

use nix::fcntl::{fcntl, FcntlArg, OFlag};
use nix::poll::{poll, PollFd, PollFlags, PollTimeout};
use nix::pty::openpty;
use nix::sys::termios::{cfmakeraw, tcgetattr, tcsetattr, SetArg};
use nix::unistd::ttyname;

pub struct Pty {
    /// Write line-protocol bytes here (non-blocking: a full buffer is
    /// `WouldBlock`, never a stall).
    pub master: File,
    /// Held open so the line does not hang up while the daemon reopens it.
    pub slave: File,
    /// The device path to give the daemon, e.g. `/dev/pts/7`.
    pub path: String,
}

impl Pty {
    /// Opens a pair in raw mode (no echo, no line editing).
    pub fn open() -> io::Result<Pty> {
        let pair = openpty(None, None)?;
        let mut t = tcgetattr(&pair.slave)?;
        cfmakeraw(&mut t);
        tcsetattr(&pair.slave, SetArg::TCSANOW, &t)?;
        let flags = OFlag::from_bits_retain(fcntl(&pair.master, FcntlArg::F_GETFL)?);
        fcntl(&pair.master, FcntlArg::F_SETFL(flags | OFlag::O_NONBLOCK))?;
        let path = ttyname(&pair.slave)?.to_string_lossy().into_owned();
        Ok(Pty {
            master: File::from(pair.master),
            slave: File::from(pair.slave),
            path,
        })
    }

    /// Whether bytes written to the master are still waiting on the slave
    /// side, not yet read by the program that has the line open.
    pub fn unread(&self) -> io::Result<bool> {
        let mut fds = [PollFd::new(self.slave.as_fd(), PollFlags::POLLIN)];
        let ready = poll(&mut fds, PollTimeout::ZERO)?;
        Ok(ready > 0
            && fds[0]
                .revents()
                .is_some_and(|r| r.contains(PollFlags::POLLIN)))
    }
}
