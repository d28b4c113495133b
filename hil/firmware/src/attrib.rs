//! Instruction counts per part of the board's work: the probe's `enter`/`leave` charge the
//! counter units since the last mark to the part running then, so a nested part (the shim inside
//! the link endpoint, the clock inside the receiver) is taken out of its parent. Units spent in
//! semihosting I/O are never charged (the counter is read net of [`files::excluded`]).
//!
//! Each mark costs a few dozen instructions, charged partly to the part and partly to its
//! parent; [`calibrate`] measures both shares so the report can take them out.

use crate::files;
use core::cell::RefCell;
use critical_section::Mutex;
use slotwise_hil::{Part, Probe};

const PARTS: usize = Part::ALL.len();
const DEPTH: usize = 8;

struct Attr {
    stack: [Option<Part>; DEPTH],
    depth: usize,
    last: u64,
    counts: [u64; PARTS],
    calls: [u64; PARTS],
    /// Parts started while this part ran.
    nested: [u64; PARTS],
}

static ATTR: Mutex<RefCell<Attr>> = Mutex::new(RefCell::new(Attr {
    stack: [None; DEPTH],
    depth: 0,
    last: 0,
    counts: [0; PARTS],
    calls: [0; PARTS],
    nested: [0; PARTS],
}));

fn index(p: Part) -> usize {
    Part::ALL.iter().position(|&q| q == p).unwrap_or(0)
}

fn net_now() -> u64 {
    crate::arch::now().saturating_sub(files::excluded())
}

impl Attr {
    fn top(&self) -> Option<Part> {
        self.depth
            .checked_sub(1)
            .and_then(|i| self.stack.get(i).copied().flatten())
    }

    fn charge(&mut self, t: u64) {
        if let Some(p) = self.top() {
            if let Some(c) = self.counts.get_mut(index(p)) {
                *c += t.saturating_sub(self.last);
            }
        }
        self.last = t;
    }
}

fn enter(p: Part) {
    critical_section::with(|cs| {
        let t = net_now();
        let mut a = ATTR.borrow_ref_mut(cs);
        a.charge(t);
        if let Some(parent) = a.top() {
            if let Some(n) = a.nested.get_mut(index(parent)) {
                *n += 1;
            }
        }
        if let Some(c) = a.calls.get_mut(index(p)) {
            *c += 1;
        }
        let d = a.depth;
        if let Some(s) = a.stack.get_mut(d) {
            *s = Some(p);
        }
        a.depth = (d + 1).min(DEPTH);
    });
}

fn leave() {
    critical_section::with(|cs| {
        let t = net_now();
        let mut a = ATTR.borrow_ref_mut(cs);
        a.charge(t);
        a.depth = a.depth.saturating_sub(1);
    });
}

/// Counts, calls and nested starts per part when the steady state began.
static STEADY: Mutex<RefCell<Option<Totals>>> = Mutex::new(RefCell::new(None));

type Totals = [(&'static str, u64, u64, u64); PARTS];

fn steady() {
    let now = totals();
    critical_section::with(|cs| {
        let mut s = STEADY.borrow_ref_mut(cs);
        if s.is_none() {
            *s = Some(now);
        }
    });
}

/// The probe that charges the firmware's counter to the running part and notes the counts when
/// the receiver reaches its steady state.
pub const PROBE: Probe = Probe::new(enter, leave).with_steady(steady);

/// Per part, since the steady state began: (name, counter units, calls, nested starts); all zero
/// when it never began.
#[allow(dead_code)] // read by the whole-receiver build; the profile build reports whole runs
pub fn steady_totals() -> Totals {
    let now = totals();
    let at = critical_section::with(|cs| *STEADY.borrow_ref(cs));
    let mut out = now;
    for (o, n) in out.iter_mut().zip(now) {
        let s = at
            .as_ref()
            .and_then(|a| a.iter().find(|x| x.0 == n.0).copied())
            .unwrap_or(n);
        *o = (
            n.0,
            n.1.saturating_sub(s.1),
            n.2.saturating_sub(s.2),
            n.3.saturating_sub(s.3),
        );
    }
    out
}

/// Per part: (name, counter units charged, calls, parts started inside it).
pub fn totals() -> [(&'static str, u64, u64, u64); PARTS] {
    critical_section::with(|cs| {
        let a = ATTR.borrow_ref(cs);
        let mut out = [("", 0, 0, 0); PARTS];
        for (i, (o, p)) in out.iter_mut().zip(Part::ALL).enumerate() {
            let get = |v: &[u64; PARTS]| v.get(i).copied().unwrap_or(0);
            *o = (p.name(), get(&a.counts), get(&a.calls), get(&a.nested));
        }
        out
    })
}

/// Forget every count.
pub fn reset() {
    critical_section::with(|cs| {
        let mut a = ATTR.borrow_ref_mut(cs);
        a.counts = [0; PARTS];
        a.calls = [0; PARTS];
        a.nested = [0; PARTS];
        a.depth = 0;
    });
}

/// Counter units one empty mark pair costs over `n` pairs: (charged to the marked part, charged
/// to its parent). Leaves the counts reset.
pub fn calibrate(n: u32) -> (u64, u64) {
    reset();
    {
        let _parent = PROBE.part(Part::Receiver);
        for _ in 0..n {
            let _child = PROBE.part(Part::Shim);
        }
    }
    let t = totals();
    let charged = |p: Part| t.get(index(p)).map_or(0, |x| x.1);
    let own = charged(Part::Shim);
    let parent = charged(Part::Receiver);
    reset();
    (own, parent)
}
