"""Touchstone reading, evaluation and writing, checked against scikit-rf and circuit theory.

Files are written here by hand in the layout of the Touchstone File Format Specification 2.0
(IBIS Open Forum, 2009): option line ``# <unit> <parameter> <format> R <n>``, ``!`` comments,
version-1 two-port order N11 N21 N12 N22, version-1 Z/Y normalised to R, version-2 keywords.
"""

from __future__ import annotations

import math
import os
import stat
from pathlib import Path

import numpy as np
import pytest
import skrf

from sweeps.design import Band, Design, SwitchStates
from sweeps.errors import TouchstoneError
from sweeps.evaluate import evaluate
from sweeps.geometry import CrossSection
from sweeps.metrics import METRIC_NAMES, compute_metrics
from sweeps.touchstone import evaluate_touchstone, read_touchstone, write_touchstone
from tests.sweeps.circuit_models import series_rlc

UNITS = {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9}
F = np.linspace(800e6, 1000e6, 21)


def rlc(f: np.ndarray) -> np.ndarray:
    """A series RLC antenna model, 70 ohm, resonant at 915 MHz, Q = 6 (invented test data)."""
    return series_rlc(f, 70.0, 6.0)

def num(x: float) -> str:
    """All digits of a float (repr of a Python float round-trips exactly)."""
    return repr(float(x))


def pair(v: complex, fmt: str) -> str:
    v = complex(v)
    if fmt == "RI":
        return f"{num(v.real)} {num(v.imag)}"
    ang = math.degrees(math.atan2(v.imag, v.real))
    if fmt == "MA":
        return f"{num(abs(v))} {num(ang)}"
    return f"{num(20 * math.log10(abs(v)))} {num(ang)}"


def one_port_text(z: np.ndarray, f: np.ndarray, *, unit: str, param: str, fmt: str,
                  version: int, r: float = 50.0) -> str:
    if param == "S":
        vals = (z - r) / (z + r)
    elif param == "Z":
        vals = z / r if version == 1 else z
    else:
        vals = r / z if version == 1 else 1 / z
    rows = [f"{num(fi / UNITS[unit])} {pair(v, fmt)}" for fi, v in zip(f, vals, strict=True)]
    rows.insert(3, "! a comment between data lines")
    head = ["! invented test data: tool-cabinet drawer tag", f"# {unit} {param} {fmt} R {r}"]
    if version == 2:
        head = ["! invented test data: tool-cabinet drawer tag", "[Version] 2.0",
                f"# {unit} {param} {fmt} R {r}", "[Number of Ports] 1",
                f"[Number of Frequencies] {len(f)}", "[Network Data]"]
        rows.append("[End]")
    return "\n".join(head + rows) + "\n"


@pytest.mark.parametrize("version", [1, 2])
@pytest.mark.parametrize("unit", list(UNITS))
@pytest.mark.parametrize("fmt", ["RI", "MA", "DB"])
@pytest.mark.parametrize("param", ["S", "Z", "Y"])
def test_one_port_every_form(tmp_path: Path, version: int, unit: str, fmt: str,
                             param: str) -> None:
    z = rlc(F)
    path = tmp_path / "tag.s1p"
    path.write_text(one_port_text(z, F, unit=unit, param=param, fmt=fmt, version=version,
                                  r=75.0))
    data = read_touchstone(path)
    assert data.version == ("1.0" if version == 1 else "2.0")
    assert data.parameter == param
    np.testing.assert_allclose(data.f_hz, F, rtol=1e-14)
    np.testing.assert_allclose(data.z0_ohm, [75.0])
    # repr() keeps every digit; MA/DB go through trig and log: 1e-12 relative
    np.testing.assert_allclose(data.input_impedance(1), z, rtol=1e-12)
    assert "a comment between data lines" in data.comments
    assert data.comments[0].startswith("invented test data")


def test_two_port_orders(tmp_path: Path) -> None:
    """v1 order N11 N21 N12 N22; v2 says so with [Two-Port Data Order] (non-reciprocal data)."""
    s = np.array([[0.1 + 0.2j, 0.3 - 0.1j], [0.5 + 0.0j, -0.2 + 0.1j]])
    v1 = tmp_path / "a.s2p"
    v1.write_text("# GHz S RI R 50\n1.0 " + " ".join(
        pair(s[i, j], "RI") for i, j in ((0, 0), (1, 0), (0, 1), (1, 1))) + "\n")
    np.testing.assert_allclose(read_touchstone(v1).s[0], s)
    for order, seq in (("21_12", ((0, 0), (1, 0), (0, 1), (1, 1))),
                       ("12_21", ((0, 0), (0, 1), (1, 0), (1, 1)))):
        v2 = tmp_path / f"b{order}.ts"
        v2.write_text("[Version] 2.1\n# GHz S RI R 50\n[Number of Ports] 2\n"
                      f"[Two-Port Data Order] {order}\n[Number of Frequencies] 1\n"
                      "[Network Data]\n1.0 " + " ".join(pair(s[i, j], "RI") for i, j in seq)
                      + "\n[End]\n")
        np.testing.assert_allclose(read_touchstone(v2).s[0], s)


def test_three_port_rows_and_matrix_formats(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    a = 0.2 * (rng.normal(size=(2, 3, 3)) + 1j * rng.normal(size=(2, 3, 3)))
    s = a + a.transpose(0, 2, 1)  # symmetric, for the triangular forms
    full = tmp_path / "full.s3p"
    lines = ["# Hz S RI R 50"]
    for k, fk in enumerate((1e9, 2e9)):
        for i in range(3):
            row = " ".join(pair(s[k, i, j], "RI") for j in range(3))
            lines.append((f"{num(fk)} " if i == 0 else "    ") + row)
    full.write_text("\n".join(lines) + "\n")
    np.testing.assert_allclose(read_touchstone(full).s, s)
    for form, cols in (("Lower", lambda i: range(i + 1)), ("Upper", lambda i: range(i, 3))):
        p = tmp_path / f"{form}.ts"
        body = []
        for k, fk in enumerate((1e9, 2e9)):
            for i in range(3):
                row = " ".join(pair(s[k, i, j], "RI") for j in cols(i))
                body.append((f"{num(fk)} " if i == 0 else "  ") + row)
        p.write_text("[Version] 2.0\n# Hz S RI R 50\n[Number of Ports] 3\n"
                     f"[Number of Frequencies] 2\n[Matrix Format] {form}\n[Network Data]\n"
                     + "\n".join(body) + "\n[End]\n")
        np.testing.assert_allclose(read_touchstone(p).s, s, err_msg=form)


def test_v2_reference_per_port_z_not_normalised(tmp_path: Path) -> None:
    zm = np.array([[30 + 40j, 5 + 1j], [5 + 1j, 60 - 10j]])
    p = tmp_path / "z.ts"
    p.write_text("[Version] 2.0\n# MHz Z RI R 50\n[Number of Ports] 2\n"
                 "[Two-Port Data Order] 12_21\n[Number of Frequencies] 2\n[Reference] 50\n"
                 " 75 ! continued on the next line\n[Network Data]\n"
                 "900 30 40 5 1 5 1 60 -10\n910 30 40 5 1 5 1 60 -10\n[End]\n")
    data = read_touchstone(p)
    np.testing.assert_allclose(data.z0_ohm, [50.0, 75.0])
    np.testing.assert_allclose(data.network().z, np.stack([zm, zm]), rtol=1e-12)
    # antenna port 1 with port 2 terminated in its 75 ohm reference (circuit theory)
    zin = zm[0, 0] - zm[0, 1] * zm[1, 0] / (zm[1, 1] + 75.0)
    np.testing.assert_allclose(data.input_impedance(1), [zin, zin], rtol=1e-12)
    zin2 = zm[1, 1] - zm[0, 1] * zm[1, 0] / (zm[0, 0] + 50.0)
    np.testing.assert_allclose(data.input_impedance(2), [zin2, zin2], rtol=1e-12)


def test_noise_and_information_blocks_are_skipped(tmp_path: Path) -> None:
    s2 = "0.1 0 0.9 10 0.01 5 0.2 -30"
    v1 = tmp_path / "amp.s2p"
    v1.write_text(f"# GHz S MA R 50\n1 {s2}\n2 {s2}\n! noise follows\n"
                  "1 0.5 0.3 40 0.2\n2 0.6 0.3 45 0.2\n")
    assert read_touchstone(v1).s.shape == (2, 2, 2)
    v2 = tmp_path / "amp.ts"
    v2.write_text("[Version] 2.0\n# GHz S MA R 50\n[Number of Ports] 2\n"
                  "[Two-Port Data Order] 21_12\n[Number of Frequencies] 2\n"
                  "[Number of Noise Frequencies] 1\n[Begin Information]\n"
                  "free text [not a keyword] 1 2 3\n[End Information]\n[Network Data]\n"
                  f"1 {s2}\n2 {s2}\n[Noise Data]\n1 0.5 0.3 40 0.2\n[End]\n")
    data = read_touchstone(v2)
    np.testing.assert_allclose(data.s, read_touchstone(v1).s)


def test_written_by_scikit_rf_is_read(tmp_path: Path) -> None:
    """scikit-rf's own writer (4-pair row wrapping for 5 ports, v1 and v2.1)."""
    rng = np.random.default_rng(5)
    s = 0.2 * (rng.normal(size=(3, 5, 5)) + 1j * rng.normal(size=(3, 5, 5)))
    net = skrf.Network(frequency=skrf.Frequency.from_f([1e9, 2e9, 3e9], unit="Hz"), s=s,
                       z0=50.0)
    for version, name in (("1.0", "five.s5p"), ("2.1", "five.ts")):
        text = net.write_touchstone(filename=name, return_string=True, version=version)
        (tmp_path / name).write_text(text)
        np.testing.assert_allclose(read_touchstone(tmp_path / name).s, s, rtol=1e-12)


# --------------------------------------------------------------------------- metrics


@pytest.fixture(scope="module")
def dipole_eval():
    design = Design("dipole", {"length_m": 0.150}, CrossSection.trace(3e-3, 0.4e-3),
                    conductivity_s_per_m=3e4)
    return evaluate(design, Band(705e6, 1155e6, 46, 915e6))  # 10 MHz steps, 915 on the grid


def test_every_s_parameter_metric_agrees_with_scikit_rf(tmp_path: Path, dipole_eval) -> None:
    """Write the dipole as DB-form S data, evaluate it, recompute each metric with skrf."""
    f, z = dipole_eval.f_hz, dipole_eval.zin
    p = tmp_path / "dipole.s1p"
    p.write_text(one_port_text(z, f, unit="MHz", param="S", fmt="DB", version=1))
    ms = evaluate_touchstone(p, target_hz=915e6)
    net = skrf.Network(str(p))
    v = ms.values
    it = int(np.argmin(np.abs(net.f - 915e6)))
    assert net.f[it] == pytest.approx(915e6)
    assert v["s11_db"] == pytest.approx(net.s_db[it, 0, 0], abs=1e-9)
    assert complex(v["zin_re_ohm"], v["zin_im_ohm"]) == pytest.approx(net.z[it, 0, 0],
                                                                      rel=1e-9)
    # resonance: between the two samples where skrf's Im Z changes sign
    x = net.z[:, 0, 0].imag
    k = int(np.nonzero(np.diff(np.sign(x)))[0][0])
    assert net.f[k] <= v["resonance_mhz"] * 1e6 <= net.f[k + 1]
    # match: within one sample of skrf's smallest |S11|
    im = int(np.argmin(net.s_mag[:, 0, 0]))
    assert abs(v["match_mhz"] * 1e6 - net.f[im]) <= net.f[1] - net.f[0]
    # bandwidth: |S11| <= -10 dB is VSWR <= 1.925 (skrf's s_vswr); edges from skrf's dB
    inside = np.nonzero(net.s_vswr[:, 0, 0] <= (1 + 10 ** -0.5) / (1 - 10 ** -0.5))[0]
    lo, hi = inside[0], inside[-1]
    db = net.s_db[:, 0, 0]
    f_lo = np.interp(-10, [db[lo], db[lo - 1]], [net.f[lo], net.f[lo - 1]])
    f_hi = np.interp(-10, [db[hi], db[hi + 1]], [net.f[hi], net.f[hi + 1]])
    assert v["bandwidth_mhz"] * 1e6 == pytest.approx(f_hi - f_lo, rel=1e-9)
    assert v["fractional_bandwidth"] == pytest.approx((f_hi - f_lo) / (v["match_mhz"] * 1e6))
    # Q_Z from skrf's Z with numpy's second-order central difference (coarser: 1 %)
    w = 2 * np.pi * net.f
    dz = np.gradient(net.z[:, 0, 0], w)
    f0 = v["resonance_mhz"] * 1e6
    r0 = np.interp(f0, net.f, net.z[:, 0, 0].real)
    slope = complex(np.interp(f0, net.f, dz.real), np.interp(f0, net.f, dz.imag))
    assert v["q_factor"] == pytest.approx(2 * np.pi * f0 / (2 * r0) * abs(slope), rel=0.01)
    # power-wave reflection of each default switch load, through skrf's "power" definition
    sw = SwitchStates()
    za = net.z[it, 0, 0]
    for name, load in (("gamma_closed", sw.closed), ("gamma_open", sw.open)):
        g = skrf.network.z2s(np.array([[[load.impedance(915e6)]]]), z0=np.array([[za]]),
                             s_def="power")[0, 0, 0]
        assert v[name] == pytest.approx(abs(g), rel=1e-9)
    # what S-parameters cannot give, with the reason
    assert v["efficiency"] is None and "currents" in ms.reasons["efficiency"]
    assert v["gain_dbi"] is None and "fields" in ms.reasons["gain_dbi"]
    for name in ("delta_rcs_dbsm", "read_range_m", "chu_ratio"):
        assert v[name] is None and ms.reasons[name]


def test_touchstone_metrics_equal_solver_metrics(tmp_path: Path, dipole_eval) -> None:
    """The same design through the solver and through its exported Touchstone file."""
    p = write_touchstone(tmp_path / "tag.s1p", dipole_eval.f_hz, dipole_eval.z, 50.0,
                         ["shape = dipole", "length_mm = 150"])
    ms = evaluate_touchstone(p, target_hz=915e6)
    for name in METRIC_NAMES:
        solver_value = dipole_eval.metrics.values[name]
        if name in ("efficiency", "gain_dbi", "delta_rcs_dbsm", "read_range_m", "chu_ratio"):
            assert ms.values[name] is None
        elif solver_value is None:
            assert ms.values[name] is None, name
        else:
            assert ms.values[name] == pytest.approx(solver_value, rel=1e-9, abs=1e-9), name


def test_multiport_antenna_port_and_reference(tmp_path: Path) -> None:
    zm = np.broadcast_to(np.array([[40 + 10j, 8 - 2j], [8 - 2j, 55 + 5j]]), (6, 2, 2))
    f = np.linspace(900e6, 950e6, 6)
    p = write_touchstone(tmp_path / "two.s2p", f, zm, 50.0, [])
    ms = evaluate_touchstone(p, port=2, target_hz=920e6, z0_ohm=75.0)
    zin = zm[0, 1, 1] - zm[0, 0, 1] * zm[0, 1, 0] / (zm[0, 0, 0] + 50.0)
    assert complex(ms.values["zin_re_ohm"], ms.values["zin_im_ohm"]) == pytest.approx(zin)
    ref = compute_metrics(f, np.full(6, zin), target_hz=920e6, z0_ohm=75.0,
                          switch=SwitchStates())
    assert ms.values["s11_db"] == pytest.approx(ref.values["s11_db"])
    with pytest.raises(TouchstoneError, match=r"two\.s2p: port 3 does not exist"):
        evaluate_touchstone(p, port=3)
    with pytest.raises(TouchstoneError, match="outside"):
        evaluate_touchstone(p, target_hz=1e9)


def test_dc_point_left_out(tmp_path: Path) -> None:
    f = np.concatenate([[0.0], F])
    z = np.concatenate([[70.0 + 0j], rlc(F)])
    p = tmp_path / "dc.s1p"
    p.write_text("# Hz Z RI R 1\n" + "\n".join(f"{num(fi)} {pair(v, 'RI')}"
                                              for fi, v in zip(f, z, strict=True)) + "\n")
    ms = evaluate_touchstone(p)
    assert ms.arrays["f_hz"][0] == F[0]
    assert ms.values["resonance_mhz"] == pytest.approx(915, rel=1e-3)


# --------------------------------------------------------------------------- writing


def test_write_round_trip_through_scikit_rf(tmp_path: Path) -> None:
    f = np.linspace(800e6, 1000e6, 11)
    zm = np.stack([np.array([[rlc(np.array([fi]))[0], 5 + 2j], [5 + 2j, 60 - 8j]]) for fi in f])
    p = write_touchstone(tmp_path / "out.s2p", f, zm, 50.0,
                         ["shape = dipole", "width_mm = 3\nthickness_mm = 0.4", "σ in S/m"])
    assert p == tmp_path / "out.s2p"
    text = p.read_text()
    assert "[Begin Information]" not in text
    assert "!shape = dipole" in text and "!thickness_mm = 0.4" in text
    assert "!? in S/m" in text  # ASCII only
    net = skrf.Network(str(p))  # scikit-rf reads it on its own
    np.testing.assert_allclose(net.z, zm, rtol=1e-12)
    back = read_touchstone(p)
    np.testing.assert_allclose(back.network().z, zm, rtol=1e-12)
    assert back.comments[:3] == ["shape = dipole", "width_mm = 3", "thickness_mm = 0.4"]
    mode = stat.S_IMODE(os.stat(p).st_mode)
    assert mode == 0o666 & ~_umask()


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def test_write_unequal_references_uses_v2(tmp_path: Path) -> None:
    f = np.array([1e9, 2e9])  # F == P: the (P,) reference must not be read per frequency
    zm = np.broadcast_to(np.array([[40 + 10j, 8 - 2j], [8 - 2j, 55 + 5j]]), (2, 2, 2))
    p = write_touchstone(tmp_path / "ref.s2p", f, zm, [50.0, 75.0], ["x"])
    data = read_touchstone(p)
    assert data.version == "2.1"
    np.testing.assert_allclose(data.z0_ohm, [50, 75])
    np.testing.assert_allclose(data.network().z, zm, rtol=1e-12)
    with pytest.raises(TouchstoneError, match="version 1.0 has one reference"):
        write_touchstone(tmp_path / "v1.s2p", f, zm, [50.0, 75.0], [], version="1.0")


@pytest.mark.parametrize(
    ("name", "match"),
    [("out.s2p", r"out\.s2p: a 1-port result needs the extension \.s1p"),
     ("out.txt", r"needs the extension \.s1p \(got \.txt\)"),
     ("out", r"needs the extension \.s1p \(got none\)"),
     ("missing/out.s1p", "does not exist")],
)
def test_write_refuses_bad_paths(tmp_path: Path, name: str, match: str) -> None:
    with pytest.raises(TouchstoneError, match=match):
        write_touchstone(tmp_path / name, F, rlc(F)[:, None, None], 50.0, [])
    assert list(tmp_path.iterdir()) == []  # nothing left behind


@pytest.mark.parametrize(
    ("f", "z", "z0", "match"),
    [(F[::-1], rlc(F), 50.0, "strictly increasing"),
     (F, np.full(len(F), np.nan + 0j), 50.0, "non-finite"),
     (F, rlc(F), 0.0, "must be > 0"),
     (F, rlc(F)[:5], 50.0, "shape")],
)
def test_write_refuses_bad_data(tmp_path: Path, f, z, z0, match: str) -> None:
    target = tmp_path / "bad.s1p"
    target.write_text("previous content\n")
    with pytest.raises(TouchstoneError, match=match):
        write_touchstone(target, f, z, z0, [])
    assert target.read_text() == "previous content\n"  # an old result is never damaged
    assert [p.name for p in tmp_path.iterdir()] == ["bad.s1p"]
