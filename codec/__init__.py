"""coefwire codec: orthonormal-basis coding of telemetry frames at a guaranteed fidelity.

Data flows samples -> frames -> coefficients -> term selection -> quantizer ->
frame layout -> bytes, and back in :func:`decode`.
"""

from . import _wavelets  # noqa: F401  (registers db2..db10, sym4..sym8)
from ._bases import Basis, as_basis, basis_from_code, basis_names, register_basis
from ._codec import DecodeResult, EncodeResult, as_samples, decode, encode, frame_key, reconstruct
from ._compare import Comparison, compare_bases, energy_compaction
from ._crc import crc16_ibm3740, crc32_iso_hdlc
from ._errors import CoefwireError, FrameError, InputError, ProfileError
from ._klt import TrainedBasis, load_trained_basis, save_trained_basis, train_klt
from ._profile import (
    ChannelSpec,
    Profile,
    default_profile,
    load_profile,
    profile_id,
    read_toml,
    save_profile,
)
from ._report import error_figures
from ._stream import CONCEALED, DELIVERED, GAP, LOST, STATUS_NAMES
from ._streaming import StreamDecoder, StreamEncoder

__all__ = [
    "Basis", "as_basis", "basis_from_code", "basis_names", "register_basis",
    "DecodeResult", "EncodeResult", "as_samples", "decode", "encode", "reconstruct",
    "frame_key",
    "Comparison", "compare_bases", "energy_compaction",
    "TrainedBasis", "load_trained_basis", "save_trained_basis", "train_klt",
    "crc16_ibm3740", "crc32_iso_hdlc",
    "FrameError", "InputError", "ProfileError", "CoefwireError",
    "ChannelSpec", "Profile", "default_profile", "load_profile", "profile_id", "read_toml",
    "save_profile",
    "error_figures",
    "CONCEALED", "DELIVERED", "GAP", "LOST", "STATUS_NAMES", "StreamDecoder", "StreamEncoder",
]
