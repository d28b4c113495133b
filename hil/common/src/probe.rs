//! Where a run's work goes: the driver, the link shim and the profile's wrappers mark the part of
//! the board they run ([`Part`]); the firmware charges the instructions in between to that part,
//! the host charges nothing ([`Probe::NONE`]).

/// A part of the board's work, for the instruction counts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Part {
    /// The receiver pipeline: unwrapping, slot location, gates, sifting, tallies, key frames.
    Receiver,
    /// The clock stage inside the receiver: acquisition, tracking, marker numbering.
    Clock,
    /// The link endpoint: announce frames out, answers frames in.
    Link,
    /// The live-statistics monitor with its alarms, and their frames.
    Monitor,
    /// The harness's transport shim between the link endpoint and the prepared streams.
    Shim,
}

impl Part {
    /// Every part, in report order.
    pub const ALL: [Part; 5] = [
        Self::Receiver,
        Self::Clock,
        Self::Link,
        Self::Monitor,
        Self::Shim,
    ];

    /// Name in reports.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Receiver => "receiver",
            Self::Clock => "clock",
            Self::Link => "link",
            Self::Monitor => "monitor",
            Self::Shim => "shim",
        }
    }

    /// Whether the part is the core's work (everything but the harness's shim).
    pub const fn is_core(self) -> bool {
        !matches!(self, Self::Shim)
    }
}

/// Hooks called when a part starts and ends (nested parts interrupt their parent).
#[derive(Clone, Copy, Debug)]
pub struct Probe {
    enter: fn(Part),
    leave: fn(),
    steady: fn(),
}

fn no_enter(_: Part) {}
fn no_leave() {}
fn no_steady() {}

impl Probe {
    /// Hooks that do nothing (the host).
    pub const NONE: Self = Self {
        enter: no_enter,
        leave: no_leave,
        steady: no_steady,
    };

    /// Call `enter` at the start of each part and `leave` at its end.
    pub const fn new(enter: fn(Part), leave: fn()) -> Self {
        Self {
            enter,
            leave,
            steady: no_steady,
        }
    }

    /// Also call `steady` once, outside every part, when the receiver reaches its steady state
    /// (clock locked and slots numbered: the first detection that reaches the sifter).
    pub const fn with_steady(self, steady: fn()) -> Self {
        Self { steady, ..self }
    }

    /// The receiver has reached its steady state (see [`Self::with_steady`]).
    pub fn steady(&self) {
        (self.steady)();
    }

    /// Mark `part` as running until the returned guard drops.
    pub fn part(&self, part: Part) -> PartGuard {
        (self.enter)(part);
        PartGuard { leave: self.leave }
    }
}

/// Ends its part when dropped.
pub struct PartGuard {
    leave: fn(),
}

impl Drop for PartGuard {
    fn drop(&mut self) {
        (self.leave)();
    }
}
