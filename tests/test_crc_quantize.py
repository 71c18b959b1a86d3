"""CRCs against the published catalogue and the standard library; the step table."""

import binascii
import zlib

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from codec import crc16_ibm3740, crc32_iso_hdlc
from codec._quantize import code_for_step, step_from_code


def test_crc_check_values():
    # Check values for the ASCII string "123456789" from the catalogue of parametrised CRC
    # algorithms (R. Williams / G. Cook): CRC-16/IBM-3740 = 0x29B1, CRC-32/ISO-HDLC = 0xCBF43926.
    assert crc16_ibm3740(b"123456789") == 0x29B1
    assert crc32_iso_hdlc(b"123456789") == 0xCBF43926


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300))
def test_crc_equals_standard_library(data):
    # binascii.crc_hqx (CRC-CCITT, init given) and zlib.crc32 are independent C implementations.
    assert crc16_ibm3740(data) == binascii.crc_hqx(data, 0xFFFF)
    assert crc32_iso_hdlc(data) == zlib.crc32(data)


def test_step_table_is_exact_eighth_octaves():
    codes = np.arange(1024)
    steps = step_from_code(codes)
    # 2**(k/8) correctly rounded: compare with Python's float pow, which is accurate to 1 ulp.
    ref = np.array([2.0 ** ((k - 512) / 8) for k in codes])
    assert np.all(np.abs(steps - ref) <= np.spacing(ref))
    assert np.array_equal(step_from_code(512), 1.0) and step_from_code(520) == 2.0
    assert np.array_equal(code_for_step(steps), codes)
