//! A pseudo-terminal pair standing in for a serial line: the simulator (or a
//! test) writes to the master; the daemon opens the slave path as its port.

use std::ffi::CStr;
use std::fs::File;
use std::io;
use std::os::fd::FromRawFd;

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
        let mut master: libc::c_int = -1;
        let mut slave: libc::c_int = -1;
        // SAFETY: openpty writes two file descriptors into the provided
        // integers; the name, termios and winsize pointers may be null.
        let rc = unsafe {
            libc::openpty(
                &mut master,
                &mut slave,
                std::ptr::null_mut(),
                std::ptr::null(),
                std::ptr::null(),
            )
        };
        if rc != 0 {
            return Err(io::Error::last_os_error());
        }
        // SAFETY: both descriptors were just returned by openpty and are
        // owned by nothing else; File takes ownership and closes them.
        let (master_f, slave_f) = unsafe { (File::from_raw_fd(master), File::from_raw_fd(slave)) };
        // SAFETY: termios is plain data; tcgetattr fills it for a valid fd.
        unsafe {
            let mut t: libc::termios = std::mem::zeroed();
            if libc::tcgetattr(slave, &mut t) != 0 {
                return Err(io::Error::last_os_error());
            }
            libc::cfmakeraw(&mut t);
            if libc::tcsetattr(slave, libc::TCSANOW, &t) != 0 {
                return Err(io::Error::last_os_error());
            }
            let flags = libc::fcntl(master, libc::F_GETFL);
            if flags < 0 || libc::fcntl(master, libc::F_SETFL, flags | libc::O_NONBLOCK) != 0 {
                return Err(io::Error::last_os_error());
            }
        }
        let mut buf = [0 as libc::c_char; 128];
        // SAFETY: ttyname_r writes a NUL-terminated path of at most buf.len()
        // bytes into buf for a valid terminal fd.
        let rc = unsafe { libc::ttyname_r(slave, buf.as_mut_ptr(), buf.len()) };
        if rc != 0 {
            return Err(io::Error::from_raw_os_error(rc));
        }
        // SAFETY: on success buf holds a NUL-terminated string.
        let path = unsafe { CStr::from_ptr(buf.as_ptr()) }
            .to_string_lossy()
            .into_owned();
        Ok(Pty {
            master: master_f,
            slave: slave_f,
            path,
        })
    }
}
