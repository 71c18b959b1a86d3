"""coefwire codec: orthonormal-basis coding of telemetry frames at a guaranteed fidelity.

Data flows samples -> frames -> coefficients -> term selection -> quantizer ->
frame layout -> bytes, and back in :func:`decode`.

Everything another package (``link_sim``, the scripts in ``tools/``) uses is
exported here; ``tests/test_architecture.py`` fails on any import of an
underscore module across packages.  The command-line helpers that commands of
other packages share are the public module :mod:`codec.cli.common`.

Public names are imported on first use (PEP 562 module ``__getattr__``), so
``import codec`` and ``coefwire --help`` stay fast: the encoder, its tables and
the libraries behind them load only when something asks for them.
"""

from __future__ import annotations

import importlib

# Every public name and the private module that defines it.
_WHERE = {
    ".transform.bases": ("Basis", "as_basis", "basis_fingerprint", "basis_from_code", "basis_names",
                "register_basis"),
    ".encoder": ("EncodeResult", "as_samples", "encode", "frame_key", "reconstruct"),
    ".stream.decode": ("DecodeResult", "decode"),
    "._compare": ("Comparison", "compare_bases", "energy_compaction"),
    ".layouts.crc": ("crc16_ibm3740", "crc32_iso_hdlc"),
    ".layouts.registry": ("Layout", "LengthField", "CodedFrames", "PackedFrames", "ParseContext",
                          "ParsedFrames", "register_layout", "unregister_layout", "layout_for"),
    "._errors": ("CoefwireError", "FrameError", "InputError", "ProfileError"),
    "._io": ("SampleTable", "atomic_output", "read_samples", "is_stdio", "write_csv_block"),
    ".transform.klt": ("TrainedBasis", "load_trained_basis", "save_trained_basis", "train_klt"),
    "._profile": ("ChannelSpec", "Profile", "default_profile", "load_profile", "profile_id",
                  "read_toml", "save_profile", "StreamNote", "load_stream_note"),
    "._progress": ("Progress",),
    ".report": ("error_figures", "channel_table", "pooled_label", "units_of", "with_unit",
                "DecoderCounts", "receive_report"),
    "._status": ("CONCEALED", "DELIVERED", "FIRST_FREE_STATUS", "GAP", "LOST", "STATUS_CODES",
                 "STATUS_NAMES"),
    ".stream.search": ("Located", "locate_frames"),
    ".stream.live": ("MAX_FILL_WINDOWS", "StreamDecoder", "StreamEncoder", "max_frame_bytes"),
    ".stream.stuffing": ("Unstuffer", "stuff"),
}
_MODULE_OF = {name: mod for mod, names in _WHERE.items() for name in names}

__all__ = [
    "Basis", "as_basis", "basis_from_code", "basis_names", "register_basis",
    "basis_fingerprint",
    "DecodeResult", "EncodeResult", "as_samples", "decode", "encode", "reconstruct",
    "frame_key",
    "Comparison", "compare_bases", "energy_compaction",
    "TrainedBasis", "load_trained_basis", "save_trained_basis", "train_klt",
    "crc16_ibm3740", "crc32_iso_hdlc",
    "FrameError", "InputError", "ProfileError", "CoefwireError",
    "SampleTable", "atomic_output", "read_samples",
    "ChannelSpec", "Profile", "default_profile", "load_profile", "profile_id", "read_toml",
    "save_profile",
    "error_figures",
    "CONCEALED", "DELIVERED", "GAP", "LOST", "STATUS_NAMES", "StreamDecoder", "StreamEncoder",
    "MAX_FILL_WINDOWS",
    "FIRST_FREE_STATUS", "STATUS_CODES",
    # used by link_sim and tools/ (issue 14, item 4): I/O, reports, frame search
    "is_stdio", "write_csv_block", "StreamNote", "load_stream_note", "Progress",
    "channel_table", "pooled_label", "units_of", "with_unit", "Located", "locate_frames",
    "max_frame_bytes", "Unstuffer", "stuff",
    # frame layouts as registered units (issue 14, item 1)
    "Layout", "LengthField", "CodedFrames", "PackedFrames", "ParseContext", "ParsedFrames",
    "register_layout", "unregister_layout", "layout_for",
    # the decoder's counts and the receive report (issue 14: typed results, one report module)
    "DecoderCounts", "receive_report",
]


def __getattr__(name: str):
    mod = _MODULE_OF.get(name)
    if mod is None:
        raise AttributeError(f"module 'codec' has no attribute {name!r}")
    value = getattr(importlib.import_module(mod, __name__), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
