"""The common-definitions table (ITU-R BS.2094, BS.2051; written from memory, see
``renderer/objects/_common_data.py``) checked for consistency with the naming rules the
standards state, and file-defined HOA packs."""

from __future__ import annotations

import re

import numpy as np
import pytest
from adm_factory import audio_object, channel, chna_body, content, document, pack, write_master

from earfold.renderer.errors import AdmError
from earfold.renderer.objects import (
    BS2051_SYSTEMS,
    COMMON_DIRECT_SPEAKERS,
    COMMON_SPEAKER_PACKS,
    read_adm,
)
from earfold.renderer.objects._common import common_channel, common_pack

#: BS.2051 layer elevations of a label's first letters (M middle, U upper, T top, B bottom).
LAYER = {"M": 0.0, "U": 30.0, "T": 90.0, "B": -30.0}
#: BS.2051 system names: upper + middle + bottom loudspeakers (LFE not counted).
SYSTEM_NAMES = {
    "A": "0+2+0", "B": "0+5+0", "C": "2+5+0", "D": "4+5+0", "E": "4+5+1",
    "F": "3+7+0", "G": "4+9+0", "H": "9+10+3", "I": "0+7+0", "J": "4+7+0",
}  # fmt: skip


def test_each_common_label_states_its_direction():
    """BS.2051 names put the layer first and the azimuth after (``U-110``: upper, -110)."""
    for ident, (_name, label, azimuth, elevation) in COMMON_DIRECT_SPEAKERS.items():
        if label.startswith("LFE"):
            continue
        m = re.fullmatch(r"([MUTB])([+-])(\d{3})", label)
        assert m, (ident, label)
        number = int(m.group(3))
        expected = number if m.group(2) == "+" else -number
        # M+022 is the rounded name of 22.5 degrees
        assert abs(azimuth - expected) < 1 or (label == "M+180" and azimuth == 180), ident
        assert elevation == LAYER[m.group(1)], ident


def test_bs2051_systems_count_their_layers_as_their_names_say():
    for system, labels in BS2051_SYSTEMS.items():
        layers = [0, 0, 0]
        for label in labels:
            if label.startswith("LFE"):
                continue
            layers[{"U": 0, "T": 0, "M": 1, "B": 2}[label[0]]] += 1
        assert "+".join(map(str, layers)) == SYSTEM_NAMES[system], system
        assert len(set(labels)) == len(labels)


def test_common_packs_list_known_channels_and_match_their_systems():
    for ident in COMMON_SPEAKER_PACKS:
        found = common_pack(ident)
        assert found is not None and found.common
        labels = [common_channel(c).blocks[0].labels[0] for c in found.channel_ids]
        _name, system, _numbers = COMMON_SPEAKER_PACKS[ident]
        key = system.split()[0]
        if key in BS2051_SYSTEMS:
            wanted = {x.replace("LFE1", "LFE") for x in BS2051_SYSTEMS[key]}
            assert set(labels) == wanted, ident


def test_common_hoa_channels_are_acn_numbered():
    """AC_0004xxxx carries ACN xxxx - 1: order n, degree m with ACN = n^2 + n + m."""
    for acn in range(16):
        block = common_channel(f"AC_0004{acn + 1:04X}").blocks[0]
        assert block.order**2 + block.order + block.degree == acn
        assert abs(block.degree) <= block.order
    assert common_channel("AC_00040011") is None  # past order 3: not in our table
    assert common_pack("AP_00040003").channel_ids[-1] == "AC_00040010"


def _hoa_master(
    tmp_path, norms, order=2, acns=(0, 1, 2, 3, 4, 5, 6, 7, 8), pack_norm=None, tweak=None
):
    channels = []
    entries = []
    for k, acn in enumerate(acns):
        n = int(acn**0.5)
        m = acn - n * n - n
        code = f"0004{0x1001 + k:04X}"
        norm = f"<normalization>{norms[k]}</normalization>" if norms[k] else ""
        channels.append(
            channel(
                f"AC_{code}",
                "HOA",
                [
                    f'<audioBlockFormat audioBlockFormatID="AB_{code}_00000001">'
                    f"<order>{n}</order><degree>{m}</degree>{norm}</audioBlockFormat>"
                ],
            )
        )
        entries.append((k + 1, f"ATU_{k + 1:08X}", f"AC_{code}", "AP_00041001"))
    extra = f"<normalization>{pack_norm}</normalization>" if pack_norm else ""
    elements = [
        content("ACO_1001", "C", ["AO_1001"]),
        audio_object("AO_1001", "S", packs=["AP_00041001"], uids=[e[1] for e in entries]),
        pack("AP_00041001", "HOA", [f"AC_0004{0x1001 + k:04X}" for k in range(len(acns))],
             extra=extra),
        *channels,
    ]  # fmt: skip
    return write_master(
        tmp_path / "h.wav",
        audio=np.zeros((8, len(acns)), np.float32),
        chna=chna_body(entries),
        axml=(tweak or (lambda x: x))(document(*elements)),
    )


def test_a_file_defined_hoa_pack(tmp_path):
    master = read_adm(_hoa_master(tmp_path, [None] * 9, pack_norm="N3D"))
    (scene,) = master.hoa
    assert (scene.order, scene.normalization, scene.acns) == (2, "N3D", tuple(range(9)))


def test_hoa_channels_out_of_acn_order_are_sorted(tmp_path):
    path = _hoa_master(tmp_path, [None] * 4, acns=(3, 0, 2, 1))
    (scene,) = read_adm(path).hoa
    assert scene.acns == (0, 1, 2, 3) and scene.tracks == (1, 3, 2, 0)


def test_hoa_order_and_degree_are_whole_numbers(tmp_path):
    def tweak(xml):
        return xml.replace("<degree>0</degree>", "<degree>0.5</degree>")

    path = _hoa_master(tmp_path, [None], acns=(0,), tweak=tweak)
    with pytest.raises(AdmError, match=r"degree '0.5' are not whole numbers"):
        read_adm(path)


def test_an_incomplete_hoa_pack_is_noted(tmp_path):
    master = read_adm(_hoa_master(tmp_path, [None] * 3, acns=(0, 1, 3)))
    assert any("carries 3 of the 4 channels of order 1" in n for n in master.notes)


@pytest.mark.parametrize(
    ("norms", "acns", "message"),
    [
        (["SN3D", "N3D", None, None], (0, 1, 2, 3), r"mixes normalisations \['N3D', 'SN3D'\]"),
        (["maxN"] * 4, (0, 1, 2, 3), r"normalization 'maxN' is none of SN3D, N3D, FuMa"),
        ([None] * 2, (1, 1), r"carries ACN \[1\] twice"),
    ],
)
def test_bad_hoa_packs(tmp_path, norms, acns, message):
    with pytest.raises(AdmError, match=message):
        read_adm(_hoa_master(tmp_path, norms, acns=acns))
