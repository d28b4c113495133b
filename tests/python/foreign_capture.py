#!/usr/bin/env python3
"""An invented transmitter and receiver the simulator cannot produce, written from the documents
alone: docs/capture-format.md (§1 the core's time base, §10 importing an export), docs/marker.md
(§1 what the transmitter sends), docs/receiver-profile.md and docs/transmitter-record.md (§4 the
sparse form). numpy only; no project code.

    foreign_capture.py OUTDIR [--seed N] [--slots N] [--noise-hz R] [--record-from-s S]
                              [--record-neighbours 0|1] [--no-text]

Writes into OUTDIR:
  export.txt           text export: `;`-delimited, times in ns with decimals, detectors 1 2 5 7
  export.bin           32-bit little-endian words (layout in BINARY_OPTIONS below), written from
                       the TDC's start: its imported time base equals the text import's
  export-cut.bin       the same words from just before the first detection: its time base is
                       shifted by the wraps before it
  receiver.toml        the receiver profile (both imports: 64-bit counter, 4 ps ticks)
  record.swtx.csv      sparse transmitter record, hello on the time base of export.txt/.bin
  record-cut.swtx.csv  the same slots, hello on the time base of export-cut.bin
  truth.json           per detection: time on both time bases, channel, true slot (null for
                       noise); expected QBER of sifted signal detections; counts; the
                       `slotwise import` options of both exports
"""
import argparse
import json
import math
import os

import numpy as np

# --- The invented link ----------------------------------------------------------------------
REP_RATE_HZ = 250e6
SLOT_PS = 1e12 / REP_RATE_HZ          # 4000 ps nominal
TX_PPM = 3.0                          # transmitter runs fast by this much
FIRST_SLOT = 7_000_000_123            # transmitter's slot counter at the first emitted slot
RX_START_PS = 2_718_281_828.0         # receiver time (its TDC) when slot FIRST_SLOT arrives
INTENSITIES = [0.5, 0.1]
INTENSITY_PROBS = [0.8, 0.2]
ETA = 8.0e-3                          # transmittance x detector efficiency
MISALIGN = 0.02                       # share of matched-basis photons in the wrong detector
CLICK_SLOT = 0.55                     # every click arrives at this fraction of the slot
JITTER_PS = 50.0
# Detectors H, V, D, A: TDC input numbers, cable skews, (basis, bit).
DETECTORS = [("H", 1, 310, 0, 0), ("V", 2, -120, 0, 1), ("D", 5, 450, 1, 0), ("A", 7, -260, 1, 1)]
GATE_HALF_PS = 300
TICK_BIN_PS = 4
TIME_BITS = 22                        # narrow counter: 2^22 x 4 ps = 16.8 us per wrap

# Binary word: time 0:22, channel 22:3 (detector index 0..3), wrap count 25:5, kind 30:2.
BINARY_OPTIONS = ["--record-bytes", "4", "--endian", "little", "--time", "0:22",
                  "--channel", "22:3", "--kind", "30:2", "--event-kind", "1",
                  "--rollover-kind", "2", "--rollover-count", "25:5", "--max-channel", "3",
                  "--tick-ps", str(TICK_BIN_PS)]
TEXT_OPTIONS = ["--delimiter", ";", "--time-column", "t_ns", "--channel-column", "detector",
                "--time-unit", "ns", "--channel-map", "1=0,2=1,5=2,7=3", "--tick-ps",
                str(TICK_BIN_PS)]

# docs/marker.md §1: first 64 bits of each sequence, s[0] first.
S7_DOC = "0000001000001100001010001111001000101100111010100111110100001110"
S9_DOC = "0000011110111110001011100110010000010010100111011010001111001111"


def mseq(degree, tap, period):
    """docs/marker.md §1: register started all ones, s[i] = s[i-degree] XOR s[i-tap]."""
    s = [1] * degree  # the register's state before bit 0, oldest first
    out = []
    for _ in range(period):
        b = s[-degree] ^ s[-tap]
        s.append(b)
        out.append(b)
    return np.array(out, dtype=np.uint8)


S7 = mseq(7, 6, 127)
S9 = mseq(9, 5, 511)
assert "".join(map(str, S7[:64])) == S7_DOC, "PRBS7 differs from docs/marker.md"
assert "".join(map(str, S9[:64])) == S9_DOC, "PRBS9 differs from docs/marker.md"
# m-sequence balance (common practice): 2^(n-1) ones per period.
assert S7.sum() == 64 and S9.sum() == 256


def p_click(mu):
    """Poisson photon number through loss ETA: at least one photon detected."""
    return 1.0 - math.exp(-ETA * mu)


def simulate(rng, n_slots, noise_hz):
    """Every slot's code (transmitter-record nibble, §2) and the detections."""
    period_ps = SLOT_PS / (1.0 + TX_PPM * 1e-6)
    codes = np.empty(n_slots, dtype=np.uint8)
    sig_slot, sig_det = [], []
    chunk = 4_000_000
    p_by_code = np.zeros(16)
    for code in range(16):
        cls = code & 3
        if cls < 2:
            p_by_code[code] = p_click(INTENSITIES[cls])
    for lo in range(0, n_slots, chunk):
        n = min(chunk, n_slots - lo)
        k = FIRST_SLOT + lo + np.arange(n, dtype=np.int64)
        cls = (rng.random(n) >= INTENSITY_PROBS[0]).astype(np.uint8)
        basis = rng.integers(0, 2, n, dtype=np.uint8)
        bit = rng.integers(0, 2, n, dtype=np.uint8)
        code = cls | (basis << 2) | (bit << 3)
        # Marker slots (docs/marker.md §1): k mod 64 == 0, J = k / 64.
        m = (k % 64) == 0
        j = k[m] // 64
        a = S7[j % 127]
        b = S9[j % 511]
        code[m] = np.where(a == 0, 3, (b << 3)).astype(np.uint8)  # vacuum, or Z, bit b, class 0
        codes[lo:lo + n] = code
        hit = rng.random(n) < p_by_code[code]
        idx = np.nonzero(hit)[0]
        c = code[idx]
        sent_basis = (c >> 2) & 1
        sent_bit = (c >> 3) & 1
        meas_basis = rng.integers(0, 2, len(idx), dtype=np.uint8)  # passive splitter
        flip = rng.random(len(idx)) < MISALIGN
        rand_bit = rng.integers(0, 2, len(idx), dtype=np.uint8)
        got = np.where(meas_basis == sent_basis, sent_bit ^ flip, rand_bit)
        sig_slot.append(lo + idx)
        sig_det.append(meas_basis * 2 + got)  # detector index: H V D A = Z0 Z1 X0 X1
    sig_slot = np.concatenate(sig_slot)
    sig_det = np.concatenate(sig_det).astype(np.int64)
    skew = np.array([d[2] for d in DETECTORS], dtype=np.float64)
    sig_t = (RX_START_PS + sig_slot * period_ps + CLICK_SLOT * period_ps + skew[sig_det]
             + rng.normal(0.0, JITTER_PS, len(sig_slot)))
    # Dark counts and stray light: uniform in time on every detector (Poisson process).
    span_ps = n_slots * period_ps
    n_noise = rng.poisson(noise_hz * len(DETECTORS) * span_ps * 1e-12)
    noise_t = RX_START_PS + rng.random(n_noise) * span_ps
    noise_det = rng.integers(0, len(DETECTORS), n_noise).astype(np.int64)
    t = np.concatenate([sig_t, noise_t])
    det = np.concatenate([sig_det, noise_det])
    true_slot = np.concatenate([sig_slot, np.full(n_noise, -1, dtype=np.int64)])
    # Slot a click lands in after its skew is removed (where a noise click will be numbered).
    land = np.floor((t - skew[det] - RX_START_PS) / period_ps).astype(np.int64)
    order = np.argsort(t, kind="stable")
    return codes, period_ps, t[order], det[order], true_slot[order], land[order]


def expected_qber(noise_hz):
    """Expected QBER of sifted signal (class 0) detections in either basis, from the model."""
    p0 = p_click(INTENSITIES[0])
    # Per key slot, class 0 sent in basis B and measured in B: 0.8 * 1/2 * p0 * 1/2.
    signal = INTENSITY_PROBS[0] * 0.5 * p0 * 0.5
    # Noise in the two gates of basis B in a class-0 slot sent in basis B: random bit.
    noise = 2 * noise_hz * (2 * GATE_HALF_PS) * 1e-12 * INTENSITY_PROBS[0] * 0.5
    # Jitter 50 ps against a 300 ps half-width: the signal lost outside the gate is < 1e-8.
    return (MISALIGN * signal + 0.5 * noise) / (signal + noise)


def expected_noise_share_sifted(noise_hz):
    """Share of noise among all sifted detections (every class), from the model: per key slot,
    detections whose basis matches the one sent (half of them)."""
    signal = sum(q * p_click(mu) for q, mu in zip(INTENSITY_PROBS, INTENSITIES)) * 0.5
    noise = len(DETECTORS) * noise_hz * (2 * GATE_HALF_PS) * 1e-12 * 0.5
    return noise / (signal + noise)


def write_text(path, t_ps_int, det):
    nums = np.array([d[1] for d in DETECTORS])[det]
    with open(path, "w") as f:
        f.write("# invented four-detector bench, time tags in ns\n")
        f.write("# inputs: 1 = H, 2 = V, 5 = D, 7 = A\n")
        f.write("t_ns;detector\n")
        ns = t_ps_int // 1000
        frac = t_ps_int % 1000
        f.write("".join(f"{a}.{b:03d};{c}\n" for a, b, c in zip(ns.tolist(), frac.tolist(),
                                                                  nums.tolist())))


def write_binary(path, ticks, det, from_zero):
    """Events and rollover words (one whenever the narrow counter has wrapped since the last
    word, carrying up to 31 wraps). `from_zero`: the file starts at the TDC's start, so its wrap
    words before the first event count every wrap since then; otherwise the file starts just
    before the first event and no wrap before it is counted. Returns (wraps not counted,
    rollover words)."""
    wraps = ticks >> TIME_BITS
    base = 0 if from_zero else int(wraps[0])
    words = []
    last = base
    for tk, w, d in zip(ticks.tolist(), wraps.tolist(), det.tolist()):
        while w > last:
            n = min(w - last, 31)
            words.append((2 << 30) | (n << 25))
            last += n
        words.append((1 << 30) | (d << 22) | (tk & ((1 << TIME_BITS) - 1)))
    np.array(words, dtype="<u4").tofile(path)
    return base, len(words) - len(ticks)


def write_record(path, codes, needed, hello_t_ps, hello_slot, n_slots):
    with open(path, "w") as f:
        f.write("# slotwise transmitter record 1.0, sparse form (docs/transmitter-record.md)\n")
        f.write("# invented 250 MHz BB84 transmitter with two intensity classes\n")
        f.write(f"# first_slot = {FIRST_SLOT}\n# slot_count = {n_slots}\n")
        f.write("# intensity_classes = 2\n# protocol = bb84\n# marker = standard\n")
        f.write(f"# hello_t_ps = {hello_t_ps}\n# hello_slot = {hello_slot}\n")
        f.write("slot,basis,bit,intensity\n")
        lines = []
        for i in needed.tolist():
            c = int(codes[i])
            if c == 3:
                lines.append(f"{FIRST_SLOT + i},-,-,vacuum\n")
            else:
                lines.append(f"{FIRST_SLOT + i},{'ZX'[(c >> 2) & 1]},{(c >> 3) & 1},{c & 3}\n")
        f.write("".join(lines))


def write_profile(path, signal_rate_hz):
    ch = []
    for i, (name, _, skew, basis, bit) in enumerate(DETECTORS):
        ch.append(f"[[channels]]\nchannel = {i}\nname = \"{name}\"\ndelay_ps = {skew}\n")
    gates = []
    for i, (_, _, _, basis, bit) in enumerate(DETECTORS):
        gates.append(f"[[gates]]\nchannel = {i}\ncentre_slot = {CLICK_SLOT}\n"
                     f"half_width_ps = {GATE_HALF_PS}\nbasis = \"{'ZX'[basis]}\"\nbit = {bit}\n")
    text = f"""# Invented four-detector receiver: passive basis splitter, 250 MHz polarization BB84.
name = "four-detector bench"

[tdc]
# Both imports write 64-bit captures of 4 ps ticks (the binary export's own tick).
counter_bits = 64
tick_ps = TICK

[clock]
rep_rate_hz = {REP_RATE_HZ:.0f}
prior_ppm = 100
signal_rate_hz = {signal_rate_hz:.0f}
jitter_ps = {JITTER_PS:.0f}

[protocol]
kind = "bb84"
intensities = {INTENSITIES}
intensity_probs = {INTENSITY_PROBS}
p_z = 0.5

""" + "\n".join(ch) + "\n" + "\n".join(gates) + "\n[marker]\nenabled = true\n"
    with open(os.path.join(path, "receiver.toml"), "w") as f:
        f.write(text.replace("TICK", str(TICK_BIN_PS)))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("outdir")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--slots", type=int, default=50_000_000)
    ap.add_argument("--noise-hz", type=float, default=10_000.0, help="per detector")
    ap.add_argument("--hello-error-slots", type=int, default=-317)
    ap.add_argument("--record-from-s", type=float, default=0.0)
    ap.add_argument("--record-neighbours", type=int, default=1)
    ap.add_argument("--no-text", action="store_true")
    a = ap.parse_args()
    os.makedirs(a.outdir, exist_ok=True)
    rng = np.random.default_rng(a.seed)
    codes, period_ps, t, det, true_slot, land = simulate(rng, a.slots, a.noise_hz)

    # Text: ns with three decimals (whole ps). Imported with --tick-ps 4, each time becomes the
    # nearest 4 ps tick, halves up (capture-format.md §10.2), in a 64-bit counter that never
    # wraps, so the core's time is ticks x 4 ps (§1).
    t_ps_int = np.rint(t).astype(np.int64)
    ticks = (t_ps_int + TICK_BIN_PS // 2) // TICK_BIN_PS
    t_text = ticks * TICK_BIN_PS
    # Binary: the same ticks; the import counts wraps from the file's start (no rollover word
    # before the first event), so the core's time is shifted by the first event's whole wraps
    # (§1 and §10.1).
    if not a.no_text:
        write_text(os.path.join(a.outdir, "export.txt"), t_ps_int, det)
    _, rollovers = write_binary(os.path.join(a.outdir, "export.bin"), ticks, det, True)
    base, _ = write_binary(os.path.join(a.outdir, "export-cut.bin"), ticks, det, False)
    t_cut = (ticks - (base << TIME_BITS)) * TICK_BIN_PS

    # Hello: a receiver time half a millisecond after the first detection and the transmitter's
    # counter then, off by a few hundred slots as a coarse hello is (marker.md §3).
    hello_true = t[0] + 0.5e9
    hello_slot = FIRST_SLOT + int((hello_true - RX_START_PS) // period_ps) + a.hello_error_slots
    hello_text = int(round(hello_true / TICK_BIN_PS)) * TICK_BIN_PS
    hello_cut = hello_text - (base << TIME_BITS) * TICK_BIN_PS

    # Every slot the receiver could announce: k-1, k, k+1 around each detection (noise at the
    # slot it lands in), inside the run.
    anchor = np.where(true_slot >= 0, true_slot, land)
    keep = t >= RX_START_PS + a.record_from_s * 1e12
    r = a.record_neighbours
    needed = np.unique(np.concatenate([anchor[keep] + d for d in range(-r, r + 1)]))
    needed = needed[(needed >= 0) & (needed < a.slots)]
    write_record(os.path.join(a.outdir, "record.swtx.csv"), codes, needed, hello_text,
                 hello_slot, a.slots)
    write_record(os.path.join(a.outdir, "record-cut.swtx.csv"), codes, needed, hello_cut,
                 hello_slot, a.slots)

    qber = expected_qber(a.noise_hz)
    noise_share = expected_noise_share_sifted(a.noise_hz)
    sig = true_slot >= 0
    signal_rate = sig.sum() / (a.slots * period_ps * 1e-12)
    write_profile(a.outdir, signal_rate)

    # The script's own count of sifted signal detections and errors (matched basis, class 0,
    # not a marker slot), from its truth, beside the model's expectation.
    gated = np.abs((t - np.array([d[2] for d in DETECTORS])[det] - RX_START_PS) % period_ps
                   - CLICK_SLOT * period_ps) < GATE_HALF_PS
    slot_of = np.where(true_slot >= 0, true_slot, land)
    inside = (slot_of >= 0) & (slot_of < a.slots)
    c = np.where(inside, codes[np.clip(slot_of, 0, a.slots - 1)], 3)
    tested = gated & inside & (c != 3) & ((c & 3) == 0) & ((FIRST_SLOT + slot_of) % 64 != 0)
    tested &= ((c >> 2) & 1) == (det >> 1)
    err = tested & (((c >> 3) & 1) != (det & 1))
    truth = {
        "slot_ps": SLOT_PS,
        "true_period_ps": period_ps,
        "first_slot": FIRST_SLOT,
        "slots": a.slots,
        "run_end_ps": {"whole": int(t_text[-1]), "cut": int(t_cut[-1])},
        "hello": {"slot": hello_slot, "whole_t_ps": hello_text, "cut_t_ps": hello_cut},
        "expected_qber_signal": qber,
        "expected_noise_share_sifted": noise_share,
        "script_tested": {
            b: {"tested": int((tested & ((det >> 1) == i)).sum()),
                "errors": int((err & ((det >> 1) == i)).sum())}
            for i, b in enumerate("zx")
        },
        "counts": {
            "detections": int(len(t)),
            "signal": int(sig.sum()),
            "noise": int((~sig).sum()),
            "noise_gated": int((~sig & gated).sum()),
            "gated": int(gated.sum()),
            "rollover_words": int(rollovers),
            "record_slots": int(len(needed)),
        },
        "t_ps": t_text.tolist(),
        "t_cut_ps": t_cut.tolist(),
        "channel": det.tolist(),
        "true_slot": [None if s < 0 else FIRST_SLOT + s for s in true_slot.tolist()],
        "import": {"text": TEXT_OPTIONS, "binary": BINARY_OPTIONS},
    }
    with open(os.path.join(a.outdir, "truth.json"), "w") as f:
        json.dump(truth, f)
    print(json.dumps({k: truth[k] for k in ("expected_qber_signal", "counts", "script_tested",
                                            "run_end_ps", "hello")}))


if __name__ == "__main__":
    main()
