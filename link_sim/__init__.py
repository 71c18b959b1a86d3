"""coefwire link simulator: channel models, FEC, receiver and link budget (built on codec).

``link_sim`` imports ``codec``; ``codec`` never imports ``link_sim``.

Public names are imported on first use (PEP 562 module ``__getattr__``): the
commands of this package import only the modules they need, and SciPy's
statistics load only when a simulation or a BER curve asks for them.
"""

from __future__ import annotations

import importlib

# Every public name and the private module that defines it.
_WHERE = {
    "._channels": ("GilbertElliott", "awgn", "bsc", "erase_frames", "gilbert_elliott"),
    "._fec": ("FEC_NAMES", "Convolutional", "NoCode", "ReedSolomon255", "fec_names", "make_code",
               "register_fec", "unregister_fec"),
    "._fec_base": ("Code", "DecodeStats"),
    "._receiver": ("CONCEAL_POLICIES", "conceal", "receive"),
    "._cli_budget": ("DEFAULT_FIDELITIES",),
    "._survey": ("SurveySettings", "expand_archive", "resolve_survey_bases"),
    "._survey_run": ("run_survey",),
    "._simulate": ("CHANNEL_KINDS", "ChannelConfig", "channel_kinds", "register_channel",
                   "unregister_channel", "transmit_bits", "ci95", "measured_ber_curve", "run_trial",
                   "simulate", "sweep"),
    "._theory": ("ber_bpsk", "ber_qpsk_gray", "ber_rs_bounded_distance", "ber_theory",
                 "ebn0_for_ber_bpsk", "linear_to_db", "qfunc"),
}
_MODULE_OF = {name: mod for mod, names in _WHERE.items() for name in names}

__all__ = [
    "GilbertElliott", "awgn", "bsc", "erase_frames", "gilbert_elliott",
    "FEC_NAMES", "Convolutional", "NoCode", "ReedSolomon255", "fec_names", "make_code",
    "register_fec", "unregister_fec", "Code", "DecodeStats",
    "CONCEAL_POLICIES", "conceal", "receive",
    "CHANNEL_KINDS", "ChannelConfig", "channel_kinds", "register_channel", "unregister_channel",
    "transmit_bits", "ci95", "measured_ber_curve", "run_trial", "simulate",
    "sweep",
    "ber_bpsk", "ber_qpsk_gray", "ber_rs_bounded_distance", "ber_theory", "ebn0_for_ber_bpsk",
    "linear_to_db", "qfunc",
    # the survey's stages, used by tools/bench_survey.py (issue 14, item 4)
    "DEFAULT_FIDELITIES", "SurveySettings", "expand_archive", "resolve_survey_bases",
    "run_survey",
]


def __getattr__(name: str):
    mod = _MODULE_OF.get(name)
    if mod is None:
        raise AttributeError(f"module 'link_sim' has no attribute {name!r}")
    value = getattr(importlib.import_module(mod, __name__), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
