"""A small reader of the plain RC netlists ``thermgui zth`` writes, turned into a state-space model.

Independent of solver/: it reads the text only. Supported elements: R, C, V (DC), E (VCVS) and
F (CCCS) inside one ``.SUBCKT``; the caller attaches current sources to pins. Modified nodal
analysis with each capacitor replaced by a voltage source equal to its state gives the
capacitor currents as a linear function of the states and inputs, hence x' = A x + B u.
"""
from __future__ import annotations

import numpy as np


def read_subckt(text: str):
    """(name, pins, elements) of the first subcircuit; elements are token lists."""
    name, pins, elems, inside = None, [], [], False
    for raw in text.splitlines():
        line = raw.strip()
        if not line or line.startswith("*"):
            continue
        tok = line.split()
        if tok[0].upper() == ".SUBCKT":
            name, pins, inside = tok[1], tok[2:], True
            continue
        if tok[0].upper() == ".ENDS":
            break
        if inside:
            elems.append(tok)
    return name, pins, elems


def state_space(text: str, pin_map: dict, inputs: list, output: str):
    """(A, B, C, D) for the subcircuit with pins renamed by ``pin_map`` (pin -> net; "0" is
    ground), a current source per entry of ``inputs`` (net receiving the input's current from
    ground) and the output voltage of net ``output``."""
    _, pins, elems = read_subckt(text)
    ren = dict(pin_map)

    def net(n):
        return "0" if n == "0" else ren.get(n, "int:" + n)

    nodes = {}

    def nid(n, external=False):
        n = n if external else net(n)
        if n == "0":
            return None
        return nodes.setdefault(n, len(nodes))

    rs, caps, vsrc, es, fs = [], [], {}, [], []
    for t in elems:
        kind = t[0][0].upper()
        if kind == "R":
            rs.append((nid(t[1]), nid(t[2]), float(t[3])))
        elif kind == "C":
            caps.append((nid(t[1]), nid(t[2]), float(t[3])))
        elif kind == "V":
            vsrc[t[0].upper()] = (nid(t[1]), nid(t[2]), float(t[4]) if len(t) > 4 else float(t[3]))
        elif kind == "E":
            es.append((nid(t[1]), nid(t[2]), nid(t[3]), nid(t[4]), float(t[5])))
        elif kind == "F":
            fs.append((nid(t[1]), nid(t[2]), t[3].upper(), float(t[4])))
        else:
            raise ValueError(f"unsupported element {t[0]}")
    ins = [nid(n, True) for n in inputs]
    out = nid(output, True)
    nn = len(nodes)
    branches = [("V", k) for k in vsrc] + [("E", i) for i in range(len(es))] + [("C", i) for i in range(len(caps))]
    bidx = {b: nn + i for i, b in enumerate(branches)}
    size = nn + len(branches)
    g = np.zeros((size, size))
    s_x = np.zeros((size, len(caps)))
    s_u = np.zeros((size, len(ins)))

    def stamp_branch(row_a, row_b, col):
        if row_a is not None:
            g[row_a, col] += 1.0
        if row_b is not None:
            g[row_b, col] -= 1.0

    for a, b, r in rs:
        for p, q, sgn in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
            if p is not None and q is not None:
                g[p, q] += sgn / r
    for key, (a, b, val) in vsrc.items():
        col = bidx[("V", key)]
        stamp_branch(a, b, col)
        if a is not None:
            g[col, a] += 1.0
        if b is not None:
            g[col, b] -= 1.0
    for i, (a, b, cp, cn, gain) in enumerate(es):
        col = bidx[("E", i)]
        stamp_branch(a, b, col)
        for n, sgn in ((a, 1), (b, -1), (cp, -gain), (cn, gain)):
            if n is not None:
                g[col, n] += sgn
    for i, (a, b, _) in enumerate(caps):
        col = bidx[("C", i)]
        stamp_branch(a, b, col)
        if a is not None:
            g[col, a] += 1.0
        if b is not None:
            g[col, b] -= 1.0
        s_x[col, i] = 1.0
    for a, b, vname, gain in fs:
        col = bidx[("V", vname)]
        # gain·i(V) flows from a through the source to b: leaves node a, enters node b
        if a is not None:
            g[a, col] += gain
        if b is not None:
            g[b, col] -= gain
    for k, n in enumerate(ins):
        if n is not None:
            s_u[n, k] += 1.0  # injected into the node
    sol_x = np.linalg.solve(g, s_x)
    sol_u = np.linalg.solve(g, s_u)
    crow = [bidx[("C", i)] for i in range(len(caps))]
    cval = np.array([c for _, _, c in caps])
    a_mat = sol_x[crow] / cval[:, None]
    b_mat = sol_u[crow] / cval[:, None]
    c_mat = sol_x[[out]]
    d_mat = sol_u[[out]]
    return a_mat, b_mat, c_mat, d_mat
