"""CRCs against the published catalogue; the step table."""

import numpy as np
from crcref import crc16_ibm3740_ref, crc32_iso_hdlc_ref
from hypothesis import given, settings
from hypothesis import strategies as st

from codec import crc16_ibm3740, crc32_iso_hdlc
from codec.quantize.steps import code_for_step, step_from_code


def test_crc_check_values():
    # Check values for the ASCII string "123456789" from the catalogue of parametrised CRC
    # algorithms (R. Williams / G. Cook): CRC-16/IBM-3740 (CCITT-FALSE) = 0x29B1,
    # CRC-32/ISO-HDLC = 0xCBF43926.  The catalogue is the reference; the codec's CRCs and
    # the implementation written from the catalogue parameters (tests/crcref.py) must
    # both give them.
    for crc16 in (crc16_ibm3740, crc16_ibm3740_ref):
        assert crc16(b"123456789") == 0x29B1
    for crc32 in (crc32_iso_hdlc, crc32_iso_hdlc_ref):
        assert crc32(b"123456789") == 0xCBF43926
    # and the empty message gives init ^ xorout: 0xFFFF and 0x00000000
    assert crc16_ibm3740(b"") == 0xFFFF and crc32_iso_hdlc(b"") == 0


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300))
def test_crc_equals_an_implementation_from_the_catalogue_parameters(data):
    # The codec wraps the standard library (binascii.crc_hqx, zlib.crc32); the reference
    # here is written from the catalogue's width/poly/init/reflection/xorout, not from
    # those functions, so a wrong initial value or a wrapped function of another CRC shows.
    assert crc16_ibm3740(data) == crc16_ibm3740_ref(data)
    assert crc32_iso_hdlc(data) == crc32_iso_hdlc_ref(data)


def test_crc16_detects_every_single_bit_error_in_a_frame():
    # A CRC whose generator has more than one term detects every single-bit error
    # (W. W. Peterson and D. T. Brown, "Cyclic codes for error detection", Proc. IRE 1961).
    msg = bytes(range(40))
    good = crc16_ibm3740(msg)
    bits = np.unpackbits(np.frombuffer(msg, np.uint8))
    for i in range(bits.size):
        flipped = bits.copy()
        flipped[i] ^= 1
        assert crc16_ibm3740(np.packbits(flipped).tobytes()) != good


def test_step_table_is_exact_eighth_octaves():
    codes = np.arange(1024)
    steps = step_from_code(codes)
    # 2**(k/8) correctly rounded: compare with Python's float pow, which is accurate to 1 ulp.
    ref = np.array([2.0 ** ((k - 512) / 8) for k in codes])
    assert np.all(np.abs(steps - ref) <= np.spacing(ref))
    assert np.array_equal(step_from_code(512), 1.0) and step_from_code(520) == 2.0
    assert np.array_equal(code_for_step(steps), codes)
