#!/usr/bin/env python3
"""Re-verify a cutpoints audit export with nothing but Python's standard library.

Usage: verify_audit_export.py EXPORT.json   (the body of GET /api/v1/audit, whole chain)

The construction (docs/audit-chain.md): each entry is {"event": E, "prev_hash": P, "hash": H}
where H = hex(SHA-256(P || JCS(E))), P is the previous entry's H (64 zeros before the first
event), seq counts 1, 2, 3, ... and JCS is RFC 8785. The RFC 8785 rules for the values that
occur in events are written out below: objects with keys sorted by UTF-16 code units, strings
escaped as JSON requires and nothing more, numbers as ECMAScript prints them.

Prints "ok EVENTS HEAD_HASH" and exits 0, or names the first bad seq and exits 1.
"""
import decimal
import hashlib
import json
import math
import sys

GENESIS = "0" * 64


def jcs_number(x):
    """ECMAScript Number::toString (ECMA-262), as RFC 8785 section 3.2.2.3 requires."""
    if isinstance(x, bool):
        raise TypeError("booleans are not numbers")
    if isinstance(x, int):
        x = float(x)
    if math.isnan(x) or math.isinf(x):
        raise ValueError("JSON has no NaN or Infinity")
    if x == 0:
        return "0"
    sign = "-" if x < 0 else ""
    # repr() gives the shortest digits that read back as the same double; the value is
    # 0.DIGITS x 10^n, with k significant digits.
    _, digit_tuple, exponent = decimal.Decimal(repr(abs(x))).as_tuple()
    raw = "".join(map(str, digit_tuple))
    n = exponent + len(raw)
    digits = raw.rstrip("0")
    k = len(digits)
    if k <= n <= 21:
        text = digits + "0" * (n - k)
    elif 0 < n <= 21:
        text = digits[:n] + "." + digits[n:]
    elif -6 < n <= 0:
        text = "0." + "0" * (-n) + digits
    else:
        e = n - 1
        mantissa = digits if k == 1 else digits[0] + "." + digits[1:]
        text = mantissa + "e" + ("+" if e > 0 else "-") + str(abs(e))
    return sign + text


def jcs(value):
    """RFC 8785 canonical JSON text of a parsed value."""
    if value is None:
        return "null"
    if value is True:
        return "true"
    if value is False:
        return "false"
    if isinstance(value, (int, float)):
        return jcs_number(value)
    if isinstance(value, str):
        # Escapes only '"', '\\' and control characters, \u00xx in lower case.
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, list):
        return "[" + ",".join(jcs(v) for v in value) + "]"
    if isinstance(value, dict):
        keys = sorted(value, key=lambda k: k.encode("utf-16-be"))
        return "{" + ",".join(json.dumps(k, ensure_ascii=False) + ":" + jcs(value[k]) for k in keys) + "}"
    raise TypeError(f"not JSON: {value!r}")


def main(path):
    with open(path, encoding="utf-8") as f:
        entries = json.load(f)["entries"]
    prev = GENESIS
    for expected_seq, entry in enumerate(entries, start=1):
        event = entry["event"]
        seq = event["seq"]
        if seq != expected_seq:
            print(f"event seq {seq}: sequence does not match (expected {expected_seq})")
            return 1
        if entry["prev_hash"] != prev:
            print(f"event seq {seq}: link does not match")
            return 1
        digest = hashlib.sha256((prev + jcs(event)).encode("utf-8")).hexdigest()
        if digest != entry["hash"]:
            print(f"event seq {seq}: hash does not match")
            return 1
        prev = digest
    print(f"ok {len(entries)} {prev}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1]))
