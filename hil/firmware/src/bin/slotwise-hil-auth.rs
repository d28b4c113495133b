//! What authenticating the sifting link costs on the board: the core's `LinkAuth` tags frames of
//! three payload sizes (an answers frame of 3 entries, one of 64 — the host's batch — and the
//! largest sifting-link payload, 1056 bytes) and a second end checks each tag; the instructions of every
//! `seal` and every `verify` are counted. Round mode's work is counted too: the digest of an
//! answered frame of 64 announcements, adding a frame to a round outcome, and one round tag
//! (hashing the outcome's last block and padding it). Writes `auth-fw.txt`. A binary apart from
//! the board build, so the board build stays what its figures measure.

#![no_std]
#![no_main]

// Shared with the board build, which uses all of it; this run needs only the counter.
#[cfg(target_arch = "arm")]
#[path = "../arch_arm.rs"]
#[allow(dead_code)]
mod arch;
#[cfg(target_arch = "riscv32")]
#[path = "../arch_riscv.rs"]
#[allow(dead_code)]
mod arch;
#[path = "../exit.rs"]
#[allow(dead_code)]
mod exit;
#[path = "../files.rs"]
#[allow(dead_code)]
mod files;

use core::fmt::Write as _;
use files::ShFile;
use slotwise::formats::round::{pad_hash, Fate, FrameDigest, RoundHash, Verdict};
use slotwise::formats::tag::{Direction, TagInput};
use slotwise::formats::RecordType;
use slotwise::wire::{AuthConfig, LinkAuth, RoundLedger};

/// Tags per payload size.
const TAGS: u64 = 16;
/// Payload sizes measured, bytes.
const SIZES: [usize; 3] = [15, 76, 1056];
/// Pad words each end holds: one per tag of every size.
const WORDS: usize = 2 * TAGS as usize * SIZES.len();

#[arch::entry]
fn main() -> ! {
    arch::init_counter();
    let code = match run() {
        Ok(()) => exit::OK,
        Err(code) => code,
    };
    semihosting::process::exit(code)
}

#[panic_handler]
fn panic(_info: &core::panic::PanicInfo<'_>) -> ! {
    semihosting::process::exit(exit::PANIC)
}

fn run() -> Result<(), i32> {
    let h: [u8; 16] = core::array::from_fn(|i| (i as u8).wrapping_mul(29) ^ 0x6B);
    let mut key = [0u8; WORDS * 8];
    for (i, b) in key.iter_mut().enumerate() {
        *b = (i as u8).wrapping_mul(151) ^ 0x2D;
    }
    let cfg = AuthConfig::DEFAULT;
    let mut tx = LinkAuth::<WORDS>::new(cfg, h, &key).map_err(|_| exit::SETUP)?;
    let mut rx = LinkAuth::<WORDS>::new(cfg, h, &key).map_err(|_| exit::SETUP)?;
    let mut payload = [0u8; 1056];
    for (i, b) in payload.iter_mut().enumerate() {
        *b = (i as u8).wrapping_mul(7);
    }
    let mut r: heapless::String<512> = heapless::String::new();
    let mut ok = writeln!(r, "counter {}", arch::COUNTER).is_ok();
    let mut num = 0u64;
    for size in SIZES {
        let (mut seal, mut verify) = (0u64, 0u64);
        for _ in 0..TAGS {
            let m = TagInput {
                dir: Direction::ToReceiver,
                record: RecordType::Answers,
                seq: num as u16,
                num,
                payload: payload.get(..size).ok_or(exit::SETUP)?,
            };
            let t0 = arch::now();
            let t = tx.seal(&m);
            let t1 = arch::now();
            let v = t.as_ref().ok().map(|t| rx.verify(&m, Some(t)));
            let t2 = arch::now();
            if v != Some(Ok(())) {
                return Err(exit::REPORT);
            }
            seal += t1 - t0;
            verify += t2 - t1;
            num += 1;
        }
        ok &= writeln!(r, "seal_counts_{size} {seal}").is_ok();
        ok &= writeln!(r, "verify_counts_{size} {verify}").is_ok();
    }
    // Round mode, per answered frame of 64 announcements: its digest and its outcome entry;
    // per round and direction: one tag.
    let (mut digest, mut add, mut round_tag) = (0u64, 0u64, 0u64);
    let mut t = RoundHash::new(&h, 0, 512);
    let mut slot = 1_000u64;
    for f in 0..TAGS {
        let t0 = arch::now();
        let mut d = FrameDigest::new(&h, 64, slot);
        for i in 0..64u64 {
            d.add(slot, i % 3 == 0, (i % 32) as u8);
            slot += 40 + (i * 37 + f) % 200;
        }
        let d = d.finish();
        let t1 = arch::now();
        t.add(f, Fate::Answered, Some(&d));
        let t2 = arch::now();
        let tag = pad_hash(
            &t.hash_for(Direction::ToReceiver, Verdict::Open),
            &[0x5A; 8],
        );
        let t3 = arch::now();
        if tag == [0; 8] {
            return Err(exit::REPORT);
        }
        digest += t1 - t0;
        add += t2 - t1;
        round_tag += t3 - t2;
    }
    ok &= writeln!(r, "digest_counts_64 {digest}").is_ok();
    ok &= writeln!(r, "outcome_add_counts {add}").is_ok();
    ok &= writeln!(r, "round_tag_counts {round_tag}").is_ok();
    ok &= writeln!(
        r,
        "round_ledger_bytes {}",
        core::mem::size_of::<RoundLedger>()
    )
    .is_ok();
    let (calib_instructions, calib_counts) = arch::calibrate();
    ok &= writeln!(r, "tags {TAGS}").is_ok();
    ok &= writeln!(r, "calib_instructions {calib_instructions}").is_ok();
    ok &= writeln!(r, "calib_counts {calib_counts}").is_ok();
    ok &= writeln!(
        r,
        "link_auth_bytes {}",
        core::mem::size_of::<LinkAuth<WORDS>>()
    )
    .is_ok();
    if !ok {
        return Err(exit::REPORT);
    }
    ShFile::create(c"auth-fw.txt")
        .and_then(|mut f| f.write_all_bytes(r.as_bytes()))
        .map_err(|_| exit::REPORT)
}
