"""empymod (Werthmueller 2017, Geophysics 82(6), WB9-WB19) as the independent reference.

Run as described in docs/forward.md ("empymod as the reference"):
quasi-static (epermH = epermV = 0), source and receivers at z = 1e-3 m just
inside the earth, default Hankel key_201_2009 and Fourier key_201_2012 with
lagged convolution. empymod's frame is right-handed with z down; ours has z
up, so ours (x, y, z) = empymod (x, -y, -z).
"""
import numpy as np

empymod = __import__("empymod")
MU0 = 4e-7 * np.pi
Z = 1e-3


def _model(thickness, resistivity, t):
    depth = np.r_[0.0, np.cumsum(thickness)]
    res = np.r_[2e14, resistivity]
    return dict(depth=depth, res=res, freqtime=np.asarray(t, float), strength=1, verb=0,
                epermH=np.zeros(res.size), epermV=np.zeros(res.size))


def wire_response(thickness, resistivity, a, b, receivers, component, t, srcpts=21):
    """Step-off response of a wire a->b (ours) at receivers [(x, y)] (ours), per ampere."""
    m = _model(thickness, resistivity, t)
    src = [a[0], b[0], -a[1], -b[1], Z, Z]
    rx = np.asarray(receivers, float)
    xs, ys = rx[:, 0], -rx[:, 1]
    if component == "ex":
        out = empymod.bipole(src, [xs, ys, Z, 0.0, 0.0], signal=-1, srcpts=srcpts, **m)
        sign = 1.0
    elif component == "ey":
        out = empymod.bipole(src, [xs, ys, Z, 90.0, 0.0], signal=-1, srcpts=srcpts, **m)
        sign = -1.0
    elif component == "dbzdt":
        out = -MU0 * empymod.bipole(src, [xs, ys, Z, 0.0, 90.0], signal=0, mrec=True,
                                    srcpts=srcpts, **m)
        sign = -1.0
    else:  # pragma: no cover
        raise ValueError(component)
    out = np.asarray(out).reshape(len(t), -1)
    return sign * out.T


def polygon_loop_response(thickness, resistivity, vertices, receivers, component, t, srcpts=11):
    """Step-off of a closed polygon loop (ours, current along vertex order), sum of wires."""
    v = np.asarray(vertices, float)
    total = 0.0
    for i in range(len(v)):
        total = total + wire_response(thickness, resistivity, v[i], v[(i + 1) % len(v)],
                                      receivers, component, t, srcpts=srcpts)
    return total
