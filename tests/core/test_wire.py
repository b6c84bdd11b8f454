"""The belief frame (docs/wire-format.md): C encoder/decoder, Python mirror, CRC.

Outside references:
- IEEE Std 802.15.4 frame check sequence parameters and check values from
  ../shared/reference/check-values.md (CRC-16/KERMIT: 0x2189 over "123456789",
  0xB5B8 over 02 00 00);
- crccheck (a general-purpose CRC library from the package index) as a second
  CRC implementation.
"""

import random
import subprocess
import sys
from pathlib import Path

import pytest
from crccheck.crc import Crc16Kermit
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from peerfix.core import Status
from peerfix.core import wire
from peerfix.core._pfx import ffi, lib

ROOT = Path(__file__).resolve().parents[2]
MAX_K = lib.PFX_MAX_COMPONENTS
SETTINGS = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# --- helpers: C calls on plain integer tuples ---------------------------------


def c_belief(components):
    b = ffi.new("pfx_belief_t *")
    b.count = len(components)
    for k, (w, x, y, pxx, pxy, pyy) in enumerate(components):
        c = b.comp[k]
        c.log2w, c.x, c.y, c.pxx, c.pxy, c.pyy = w, x, y, pxx, pxy, pyy
    return b


def py_components(b):
    return [
        (b.comp[k].log2w, b.comp[k].x, b.comp[k].y, b.comp[k].pxx, b.comp[k].pxy, b.comp[k].pyy)
        for k in range(b.count)
    ]


def c_encode(components, sender=0, sequence=0, flags=0):
    meta = ffi.new("pfx_wire_meta_t *", {"sender": sender, "sequence": sequence, "flags": flags})
    buf = ffi.new("uint8_t[]", lib.PFX_WIRE_MAX_BYTES)
    n = ffi.new("size_t *")
    status = lib.pfx_wire_encode(c_belief(components), meta, buf, lib.PFX_WIRE_MAX_BYTES, n)
    return Status(status), bytes(ffi.buffer(buf, n[0]))


def c_decode(frame: bytes):
    b = ffi.new("pfx_belief_t *")
    meta = ffi.new("pfx_wire_meta_t *")
    status = lib.pfx_wire_decode(frame, len(frame), b, meta)
    return Status(status), py_components(b), (meta.sender, meta.sequence, meta.flags)


# Beliefs a node can hold: PSD covariances from (sx, sy, rho), weights in log2 Q16.
@st.composite
def beliefs(draw, max_span_m=200.0):
    n = draw(st.integers(1, MAX_K))
    cx = draw(st.floats(-8000.0, 8000.0))
    cy = draw(st.floats(-8000.0, 8000.0))
    comps = []
    for _ in range(n):
        sx = draw(st.floats(0.0, 40.0))
        sy = draw(st.floats(0.0, 40.0))
        rho = draw(st.floats(-0.999, 0.999))
        pxx, pyy = int(sx * sx * 2**20), int(sy * sy * 2**20)
        pxy = int(rho * (pxx * pyy) ** 0.5)
        x = int((cx + draw(st.floats(-max_span_m, max_span_m))) * 1024)
        y = int((cy + draw(st.floats(-max_span_m, max_span_m))) * 1024)
        x = max(-wire.REF_LIMIT, min(wire.REF_LIMIT, x))
        y = max(-wire.REF_LIMIT, min(wire.REF_LIMIT, y))
        comps.append((draw(st.integers(-40 * 65536, 0)), x, y, pxx, pxy, pyy))
    return comps


# --- check sequence -------------------------------------------------------------


def test_crc_matches_the_802_15_4_check_values():
    # IEEE 802.15.4 FCS parameters = CRC-16/KERMIT; check values from check-values.md.
    assert lib.pfx_wire_crc16(b"123456789", 9) == 0x2189
    assert lib.pfx_wire_crc16(bytes([2, 0, 0]), 3) == 0xB5B8
    assert wire.crc16_kermit(b"123456789") == 0x2189


@given(st.binary(max_size=200))
@SETTINGS
def test_crc_agrees_with_a_general_purpose_library(data):
    expected = Crc16Kermit.calc(data)  # crccheck, independent implementation
    assert lib.pfx_wire_crc16(data, len(data)) == expected
    assert wire.crc16_kermit(data) == expected


# --- size -------------------------------------------------------------------------


@pytest.mark.parametrize("k", range(1, MAX_K + 1))
def test_frame_size_per_k(k):
    size = lib.pfx_wire_size(k)
    assert size == 13 + 8 * k == wire.frame_size(k)
    assert size <= 12 + 12 * k  # the bound
    # IEEE 802.15.4: 127-octet PHY payload, 9-octet MAC header (short addresses), 2-octet FCS.
    assert size <= 127 - 9 - 2


def test_k4_frame_meets_the_48_byte_goal():
    assert lib.pfx_wire_size(4) == 45 <= 48


def test_variance_codes_are_exactly_rounded_powers_of_two():
    # D[c] = round(2^(c/8 + 10)) checked in integers alone: n is the rounded value of
    # x = 2^((c + 80) / 8) exactly when (n - 1/2)^8 <= x^8 < (n + 1/2)^8, i.e.
    # (2n - 1)^8 <= 2^(c + 88) < (2n + 1)^8 (x is irrational unless 8 | c: no ties).
    for c in range(lib.PFX_WIRE_VAR_CODES):
        n = lib.pfx_wire_var_value(c)
        assert (2 * n - 1) ** 8 <= 2 ** (c + 88) < (2 * n + 1) ** 8, c
        assert n == wire.variance_table()[c]  # the Python mirror's table
    assert lib.pfx_wire_var_value(lib.PFX_WIRE_VAR_CODES) == 0
    assert lib.pfx_wire_var_value(2**32 - 1) == 0


def test_variance_mantissas_are_up_to_date():
    out = subprocess.run([sys.executable, str(ROOT / "tools" / "gen_wire_table.py"), "--check"],
                         capture_output=True, text=True)  # fmt: skip
    assert out.returncode == 0, out.stderr


# --- encode: C and the Python mirror agree; quantisation is stable ----------------


@given(beliefs(), st.integers(0, 65535), st.integers(0, 255))
@SETTINGS
def test_c_and_python_encoders_agree_bit_for_bit(comps, sender, seq):
    status, frame = c_encode(comps, sender, seq)
    assert status == Status.OK
    assert frame == wire.encode(comps, wire.Meta(sender, seq, 0))
    assert len(frame) == wire.frame_size(len(comps))


@given(beliefs())
@SETTINGS
def test_decode_then_encode_is_stable(comps):
    _, frame = c_encode(comps)
    status, decoded, _ = c_decode(frame)
    assert status == Status.OK
    assert c_encode(decoded)[1] == frame  # encode(decode(bytes)) == bytes
    # decode(encode(belief)) is a fixed point too: quantising twice changes nothing
    assert c_decode(c_encode(decoded)[1])[1] == decoded
    assert decoded == wire.decode(frame)[0]


@given(beliefs())
@SETTINGS
def test_quantise_is_what_the_neighbours_decode(comps):
    b = c_belief(comps)
    assert lib.pfx_wire_quantise(b) == Status.OK
    _, frame = c_encode(comps)
    assert py_components(b) == c_decode(frame)[1]


@given(beliefs(max_span_m=30.0))
@SETTINGS
def test_quantisation_error_is_within_the_documented_steps(comps):
    _, frame = c_encode(comps)
    _, decoded, _ = c_decode(frame)
    h = max(range(len(comps)), key=lambda k: (comps[k][0], -k))
    order = [h] + [k for k in range(len(comps)) if k != h]
    for d, k in zip(decoded, order):
        w, x, y, pxx, pxy, pyy = comps[k]
        assert abs(d[1] - x) <= 1 and abs(d[2] - y) <= 1  # within 32 m: e = 0, 1 mm steps
        for v, dv in ((pxx, d[3]), (pyy, d[5])):
            if v >= 2 * 1024:  # above the floor, the nearest code in log: 4.5 % in variance
                assert abs(dv / v - 1) <= 0.045
        # decoded covariance positive definite (|r| <= 127/128, variances >= 2^-10 m^2)
        assert d[3] > 0 and d[5] > 0 and d[3] * d[5] > d[4] * d[4]


def test_a_site_kilometres_across_encodes_without_loss_of_range():
    # 8 km from the origin, components 500 m apart: reference exact, offsets in 16 mm steps.
    comps = [(0, 8_000 * 1024, -7_900 * 1024, 2**18, 0, 2**18), (-65536, 7_500 * 1024, -7_400 * 1024, 2**18, 0, 2**18)]
    status, frame = c_encode(comps)
    assert status == Status.OK
    _, decoded, _ = c_decode(frame)
    assert decoded[0][1:3] == (8_000 * 1024, -7_900 * 1024)
    assert abs(decoded[1][1] - 7_500 * 1024) <= 16 and abs(decoded[1][2] + 7_400 * 1024) <= 16


# --- encoder refusals ----------------------------------------------------------------


def test_encoder_statuses():
    assert c_encode([])[0] == Status.ERR_EMPTY
    assert c_encode([(0, 0, 0, -1, 0, 5)])[0] == Status.ERR_DEGENERATE
    assert c_encode([(0, 0, 0, 4, 5, 4)])[0] == Status.ERR_DEGENERATE  # pxy^2 > pxx pyy
    assert c_encode([(0, 9_000 * 1024, 0, 2**20, 0, 2**20)])[0] == Status.ERR_RANGE
    b = c_belief([(0, 0, 0, 2**20, 0, 2**20)])
    n = ffi.new("size_t *")
    meta = ffi.new("pfx_wire_meta_t *")
    small = ffi.new("uint8_t[]", 20)
    assert lib.pfx_wire_encode(b, meta, small, 20, n) == Status.ERR_FULL and n[0] == 0


def test_anchor_frame_is_a_point():
    status, frame = c_encode([(0, 5 * 1024, 7 * 1024, 0, 0, 0)], sender=7, flags=1)
    assert status == Status.OK and len(frame) == 21
    status, decoded, meta = c_decode(frame)
    assert decoded == [(0, 5 * 1024, 7 * 1024, 0, 0, 0)] and meta == (7, 0, 1)


# --- decoder validation: each rule of docs/wire-format.md -----------------------------


def good_frame():
    return bytearray(c_encode([(0, 1000, 2000, 2**20, 1000, 2**19), (-50000, 5000, -3000, 2**21, 0, 2**21)])[1])


def reseal(frame: bytearray) -> bytes:
    frame[-2:] = wire.crc16_kermit(bytes(frame[:-2])).to_bytes(2, "little")
    return bytes(frame)


def mutated(offset, value):
    f = good_frame()
    f[offset] = value
    return reseal(f)


@pytest.mark.parametrize(
    "frame, status",
    [
        (b"", Status.ERR_FORMAT),
        (mutated(0, (2 << 4) | 2), Status.ERR_VERSION),
        (mutated(0, (1 << 4) | 0), Status.ERR_FORMAT),  # count 0
        (mutated(0, (1 << 4) | 9), Status.ERR_FORMAT),  # count above the bound
        (mutated(0, (1 << 4) | 3), Status.ERR_FORMAT),  # count disagrees with the length
        (bytes(good_frame()[:-1]), Status.ERR_FORMAT),  # truncated
        (bytes(good_frame()) + b"\0", Status.ERR_FORMAT),  # trailing byte
        (mutated(1, 0x02), Status.ERR_FORMAT),  # reserved flag bit
        (mutated(1, 0x01), Status.ERR_FORMAT),  # anchor flag with two components
        (mutated(11, 3), Status.ERR_FORMAT),  # first component not the heaviest (w != 0)
        (mutated(12, 1), Status.ERR_FORMAT),  # first component off the reference
        (mutated(11 + 8 + 5, 168), Status.ERR_FORMAT),  # variance code out of range
        (mutated(11 + 8 + 7, 0x80), Status.ERR_FORMAT),  # correlation code -128
    ],
)
def test_decoder_rejects_each_bad_field(frame, status):
    got, comps, meta = c_decode(frame)
    assert got == status and comps == [] and meta == (0, 0, 0)
    with pytest.raises(wire.WireError) as err:
        wire.decode(frame)
    assert err.value.status == status


def test_corrupted_frames_fail_the_check():
    frame = bytes(good_frame())
    rng = random.Random(5)
    for _ in range(500):
        f = bytearray(frame)
        f[rng.randrange(len(f))] ^= 1 << rng.randrange(8)  # one bit error
        assert c_decode(bytes(f))[0] != Status.OK  # CRC-16 detects every single-bit error


@given(st.binary(max_size=90))
@settings(max_examples=2000, deadline=None)
def test_random_bytes_c_and_mirror_agree_on_the_status(data):
    status, comps, _ = c_decode(data)
    try:
        py, _ = wire.decode(data)
        assert status == Status.OK and comps == py
    except wire.WireError as err:
        assert status == err.status and comps == []
