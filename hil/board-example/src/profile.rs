//! The receiver's settings as they sit in flash: the bytes of a `setup.bin` followed by the bytes
//! of a `board.bin` (both written by `hil-host prepare --full`, both with their own CRC).
//!
//! One blob rather than two symbols, so a board team can replace the settings as one file, e.g.
//! by linking a different blob or by writing it to a flash sector of its own.

use core::fmt;
use slotwise_hil::board::BOARD_LEN;
use slotwise_hil::{BoardError, BoardSettings, Setup, SetupError};

/// The example profile committed beside the firmware (invented bench scenario, 100 MHz slots).
pub static PROFILE: &[u8] = include_bytes!("../profile/profile.bin");

/// Offset of the setup's channel count C (see the layout in `slotwise_hil::setup`).
const CHANNELS_AT: usize = 44;
/// Bytes of a setup before its delay entries, plus the gate count and the CRC: 46 + 8·C + 11·G + 4.
const SETUP_FIXED: usize = 46 + 4;

/// Why the profile was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ProfileError {
    /// The blob ends before the setup's channel or gate count.
    Truncated,
    /// The setup part was refused.
    Setup(SetupError),
    /// The board part was refused.
    Board(BoardError),
    /// The board part is not exactly `BOARD_LEN` bytes, in bytes.
    BoardLength(usize),
}

impl fmt::Display for ProfileError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Truncated => write!(f, "profile ends inside the setup's counts"),
            Self::Setup(e) => write!(f, "profile setup: {e}"),
            Self::Board(e) => write!(f, "profile board settings: {e}"),
            Self::BoardLength(n) => {
                write!(
                    f,
                    "profile board settings are {n} bytes, expected {BOARD_LEN}"
                )
            }
        }
    }
}

impl core::error::Error for ProfileError {}

/// The decoded profile.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Profile {
    /// TDC, slot clock, gates, sifting.
    pub setup: Setup,
    /// Recovered clock, hint, link, monitor and alarms.
    pub board: BoardSettings,
}

/// Bytes of the setup at the start of `blob`, from its channel and gate counts.
pub fn setup_len(blob: &[u8]) -> Option<usize> {
    let channels = usize::from(*blob.get(CHANNELS_AT)?);
    let gates = usize::from(*blob.get(CHANNELS_AT + 1 + 8 * channels)?);
    Some(SETUP_FIXED + 8 * channels + slotwise_hil::setup::GATE_LEN * gates)
}

/// Split `blob` into its setup and board parts and decode both (each checks its CRC).
pub fn decode(blob: &[u8]) -> Result<Profile, ProfileError> {
    let n = setup_len(blob).ok_or(ProfileError::Truncated)?;
    let (setup, board) = blob.split_at_checked(n).ok_or(ProfileError::Truncated)?;
    if board.len() != BOARD_LEN {
        return Err(ProfileError::BoardLength(board.len()));
    }
    Ok(Profile {
        setup: Setup::decode(setup).map_err(ProfileError::Setup)?,
        board: BoardSettings::decode(board).map_err(ProfileError::Board)?,
    })
}
