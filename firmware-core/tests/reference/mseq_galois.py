"""Reference m-sequences for firmware-core/tests/frame_sequences.rs, computed with `galois`.

Run: python3 -m venv /tmp/venv-marker && /tmp/venv-marker/bin/pip install numpy galois
     /tmp/venv-marker/bin/python firmware-core/tests/reference/mseq_galois.py

galois.FLFSR takes the feedback polynomial f(x) = 1 + a_1 x + ... + a_n x^n and produces
y[t] = a_1 y[t-1] + ... + a_n y[t-n]; its first n outputs are the seed state itself, oldest first.
The register taps of a PRBS generator "x^n + x^m + 1" are the delays n and m, i.e. this feedback
polynomial. The seed is all ones.
"""
import galois

GF2 = galois.GF(2)
for n, m in [(7, 6), (9, 5)]:
    f = galois.Poly.Degrees([n, m, 0], field=GF2)
    period = 2**n - 1
    lfsr = galois.FLFSR(f, state=GF2([1] * n))
    bits = [int(b) for b in lfsr.step(n + period)][n:]
    # Pack bit i into bit (i % 8) of byte i // 8, little-endian within bytes.
    packed = bytearray((period + 7) // 8)
    for i, b in enumerate(bits):
        packed[i // 8] |= b << (i % 8)
    print(f"x^{n}+x^{m}+1 primitive={f.is_primitive()} ones={sum(bits)} galois={galois.__version__}")
    print(packed.hex())
