//! The receiver's settings as they sit in flash: a profile blob (`slotwise profile compile`,
//! layout in `slotwise_hil::blob`) with the setup, the board settings and the word layout of the
//! board's FIFO bridge ([`crate::fifo`]), each section with its own CRC.
//!
//! One blob rather than several symbols, so a board team replaces the settings as one file, e.g.
//! by linking a different blob or by writing it to a flash sector of its own. It is made from
//! `profile/receiver.toml` (the invented bench scenario's receiver) with
//!
//! ```sh
//! slotwise profile compile profile/receiver.toml -o profile/receiver.swblob \
//!   --words bytes=8,endian=little,time=0:32,channel=32:4,kind=56:8,event=165,rollover=90,count=40:16,max-channel=7
//! ```

/// The example profile committed beside the firmware (invented bench scenario, 100 MHz slots).
pub static PROFILE: &[u8] = include_bytes!("../profile/receiver.swblob");
