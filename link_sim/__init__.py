"""coefwire link simulator: channel models, FEC, receiver and link budget (built on codec).

``link_sim`` imports ``codec``; ``codec`` never imports ``link_sim``.
"""

from ._channels import GilbertElliott, awgn, bsc, erase_frames, gilbert_elliott
from ._fec import FEC_NAMES, make_code
from ._receiver import CONCEAL_POLICIES, conceal, receive
from ._simulate import (
    CHANNEL_KINDS,
    ChannelConfig,
    ci95,
    measured_ber_curve,
    run_trial,
    simulate,
    sweep,
)
from ._theory import (
    ber_bpsk,
    ber_qpsk_gray,
    ber_rs_bounded_distance,
    ber_theory,
    ebn0_for_ber_bpsk,
    linear_to_db,
    qfunc,
)

__all__ = [
    "GilbertElliott", "awgn", "bsc", "erase_frames", "gilbert_elliott",
    "FEC_NAMES", "make_code",
    "CONCEAL_POLICIES", "conceal", "receive",
    "CHANNEL_KINDS", "ChannelConfig", "ci95", "measured_ber_curve", "run_trial", "simulate",
    "sweep",
    "ber_bpsk", "ber_qpsk_gray", "ber_rs_bounded_distance", "ber_theory", "ebn0_for_ber_bpsk",
    "linear_to_db", "qfunc",
]
