"""The generated C data of an exported model (``wirestate_model.h``).

Every number is written as a C99 hexadecimal floating literal (``float.hex``), so the C
code holds the very doubles computed in Python: the zero-order-hold matrices for the
default step and the controller constants round-trip bit for bit.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from wirestate.export.plan import ANTI_WINDUP_CODES, ExportPlan

#: step sizes other than the default kept per instance (matrices computed in C)
CACHE_SIZE = 8
#: two sample instants closer than this fraction of the shortest sample time coincide
EVENT_TOLERANCE = 1e-7

HEADER_TYPES = """\
enum {{ WS_PID = 1, WS_LTI = 2 }};
enum {{ WS_NO_ANTI_WINDUP = {}, WS_BACK_CALCULATION = {}, WS_CONDITIONAL = {} }};

typedef struct {{
    int type;                            /* WS_PID or WS_LTI */
    int nx, x_off;                       /* states, offset in the sampled-state array */
    int ny, y_off;                       /* outputs, offset in the held-output array */
    int nin, in_off;                     /* inputs, offset in ws_sin_kind / ws_sin_index */
    int feedthrough;                     /* outputs depend on the present inputs */
    double Ts;                           /* sample time (s) */
    double kp, ki_ts, a, b, low, high, track;   /* PID constants (see wirestate_fmu.c) */
    int has_derivative, limited, anti_windup, delay;
    int pool_off;                        /* LTI: A, B, C, D row-major in ws_pool */
}} ws_block;
""".format(
    ANTI_WINDUP_CODES["none"],
    ANTI_WINDUP_CODES["back_calculation"],
    ANTI_WINDUP_CODES["conditional"],
)


def c_double(value: float) -> str:
    """A C99 literal that is exactly ``value``."""
    value = float(value)
    if math.isnan(value):
        return "NAN"
    if math.isinf(value):
        return "INFINITY" if value > 0 else "(-INFINITY)"
    return value.hex()


def _array(ctype: str, name: str, values: Iterable, fmt=str) -> str:
    items = [fmt(v) for v in values] or [fmt(0)]
    lines, line = [], "    "
    for item in items:
        if len(line) + len(item) + 2 > 96:
            lines.append(line.rstrip())
            line = "    "
        line += item + ", "
    lines.append(line.rstrip())
    body = "\n".join(lines)
    return f"static const {ctype} {name}[{len(items)}] = {{\n{body}\n}};\n"


def _doubles(name: str, values: Iterable[float]) -> str:
    return _array("double", name, [float(v) for v in values], c_double)


def _ints(name: str, values: Iterable[int]) -> str:
    return _array("int", name, [int(v) for v in values])


def _c_string(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _blocks(plan: ExportPlan) -> tuple[str, list[float], int, int, int]:
    rows, pool = [], []
    x_off = y_off = in_off = 0
    for b in plan.blocks:
        k = b.constants
        pool_off = len(pool)
        for matrix in b.matrices:
            pool.extend(np.asarray(matrix, dtype=float).ravel())
        fields = {
            "type": "WS_PID" if b.kind == "pid" else "WS_LTI",
            "nx": b.n_states, "x_off": x_off, "ny": b.n_outputs, "y_off": y_off,
            "nin": b.n_inputs, "in_off": in_off, "feedthrough": int(b.feedthrough),
            "Ts": c_double(b.sample_time), "pool_off": pool_off,
        }  # fmt: skip
        for key in ("kp", "ki_ts", "a", "b", "low", "high", "track"):
            fields[key] = c_double(k.get(key, 0.0))
        for key in ("has_derivative", "limited", "anti_windup", "delay"):
            fields[key] = int(k.get(key, 0.0))
        rows.append(
            f"    {{ /* {b.name} */ "
            + ", ".join(f".{key} = {value}" for key, value in fields.items())
            + " },"
        )
        x_off += b.n_states
        y_off += b.n_outputs
        in_off += b.n_inputs
    if not rows:
        rows.append("    { .type = WS_LTI },")
    joined = "\n".join(rows)
    text = f"static const ws_block ws_blocks[{len(rows)}] = {{\n{joined}\n}};\n"
    return text, pool, x_off, y_off, in_off


def model_header(plan: ExportPlan, guid: str) -> str:
    """The text of ``wirestate_model.h`` for ``plan`` with the FMU's ``guid``."""
    n, m = plan.A.shape[0], plan.B.shape[1]
    p = plan.C.shape[0]
    blocks, pool, nsx, nsy, nsin = _blocks(plan)
    sample_times = [b.sample_time for b in plan.blocks]
    tolerance = EVENT_TOLERANCE * min(sample_times) if sample_times else 0.0
    sources = [s for b in plan.blocks for s in b.sources]
    x0 = [v.start for v in plan.states]
    sx0 = [v.start for v in plan.sampled_states]
    u0 = [v.start for v in plan.inputs]
    defines = {
        "WS_NX": n, "WS_NLIN": m, "WS_NLOUT": p, "WS_NU": len(plan.inputs),
        "WS_NY": len(plan.outputs), "WS_NSB": len(plan.blocks), "WS_NSX": nsx,
        "WS_NSY": nsy, "WS_NVR": len(plan.variables), "WS_CACHE_SIZE": CACHE_SIZE,
        "WS_MAXBIN": max([b.n_inputs for b in plan.blocks] or [1]),
        "WS_MAXBX": max([b.n_states for b in plan.blocks] or [1]),
        "WS_MAXBY": max([b.n_outputs for b in plan.blocks] or [1]),
    }  # fmt: skip
    head = [
        f"/* Model data of the FMU {plan.name}, generated by wirestate at export.",
        "   Part values are fixed here: re-export to change them. */",
        "#ifndef WIRESTATE_MODEL_H",
        "#define WIRESTATE_MODEL_H",
        f"#define WS_MODEL_IDENTIFIER {_c_string(plan.name)}",
        f"#define WS_GUID {_c_string(guid)}",
        *(f"#define {key} {value}" for key, value in defines.items()),
        f"#define WS_DEFAULT_STEP {c_double(plan.step)} /* {plan.step!r} s */",
        f"#define WS_EVENT_TOLERANCE {c_double(tolerance)}",
        "",
        HEADER_TYPES,
    ]
    body = [
        "/* continuous linear part, row-major: dx/dt = A x + B u, y = C x + D u */",
        _doubles("ws_A", plan.A.ravel()),
        _doubles("ws_B", plan.B.ravel()),
        _doubles("ws_C", plan.C.ravel()),
        _doubles("ws_D", plan.D.ravel()),
        f"/* exact zero-order hold at the default step {plan.step!r} s (Van Loan 1978) */",
        _doubles("ws_Ad0", plan.Ad.ravel()),
        _doubles("ws_Bd0", plan.Bd.ravel()),
        "/* linear-part inputs: kind 0 = FMU input, 1 = held sampled output; index */",
        _ints("ws_lin_in_kind", [k for k, _ in plan.linear_sources]),
        _ints("ws_lin_in_index", [i for _, i in plan.linear_sources]),
        "/* FMU outputs: kind 0 = linear-part output row, 1 = held sampled output */",
        _ints("ws_out_kind", [0 if k == 2 else 1 for k, _ in plan.output_sources]),
        _ints("ws_out_index", [i for _, i in plan.output_sources]),
        "/* sampled-block inputs: 0 = FMU input, 1 = held output, 2 = linear-part output */",
        _ints("ws_sin_kind", [k for k, _ in sources]),
        _ints("ws_sin_index", [i for _, i in sources]),
        blocks,
        _doubles("ws_pool", pool),
        "/* sample-instant order (indices into ws_blocks) */",
        _ints("ws_sample_order", plan.order),
        "/* start values */",
        _doubles("ws_x0", x0),
        _doubles("ws_sx0", sx0),
        _doubles("ws_u0", u0),
        "#endif",
    ]
    assert nsin == len(sources)
    return "\n".join(head) + "\n" + "\n".join(body) + "\n"
