"""JCAMP-DX ordinate compression (ASDF): encode and decode ``(X++(Y..Y))`` lines.

The forms are those of the JCAMP-DX specification (McDonald & Wilks, Appl.
Spectrosc. 1988, 42, 151): AFFN (free-format decimals), PAC (packed, the sign is
the delimiter), SQZ (the first digit and the sign become one letter), DIF (the
difference to the previous ordinate, with the last ordinate of a line repeated at
the start of the next line as a check), DUP (a repeat count) and combinations.

Pure functions on strings and integer arrays: no file access here.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..errors import SpecmatchError

FORMS = ("AFFN", "PAC", "SQZ", "DIF", "DUP", "DIFDUP")
MAX_LINE = 80  # the specification's maximum line length

_SQZ_POS = "@ABCDEFGHI"
_SQZ_NEG = "@abcdefghi"
_DIF_POS = "%JKLMNOPQR"
_DIF_NEG = "%jklmnopqr"
_DUP = "0STUVWXYZs"  # index = first digit of the count; 0 is never written

# Token-by-token path (used only when compressed ordinates carry decimal points):
# a token's first character is mapped to its signed digit; its kind is 'a'
# (absolute), 'd' (DIF), 'u' (DUP) or '?'.
_ASDF_TOKEN = re.compile(r"[@A-Ia-i%J-Rj-rS-Zs+\-?][0-9.]*|[0-9.]+")
_HEAD: dict[str, str] = {"?": "nan"}
_KIND: dict[int, str] = {ord(c): "a" for c in "0123456789.+-" + _SQZ_POS + _SQZ_NEG}
_KIND[ord("?")] = "?"
for _d in range(10):
    _HEAD[_SQZ_POS[_d]] = str(_d)
    _HEAD[_DIF_POS[_d]] = str(_d)
    _KIND[ord(_DIF_POS[_d])] = "d"
    if _d:
        _HEAD[_SQZ_NEG[_d]] = f"-{_d}"
        _HEAD[_DIF_NEG[_d]] = f"-{_d}"
        _HEAD[_DUP[_d]] = str(_d)
        _KIND[ord(_DIF_NEG[_d])] = "d"
        _KIND[ord(_DUP[_d])] = "u"
_EXPONENT = re.compile(r"(?<=[0-9.])[eE][+-]?[0-9]+(?=[\s,+\-]|$)")
_NOT_AFFN = re.compile(r"[^0-9.+\-,\s?]")
_AFFN_NUM = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?|\?")
_BAD_CHAR = re.compile(r"[^0-9.\s,;+\-?@A-Ia-i%J-Rj-rS-Zs]")


@dataclass(frozen=True)
class DecodedLines:
    """Ordinates of an ``(X++(Y..Y))`` table and the abscissa written on each line."""

    y: np.ndarray  # float64, one value per point
    line_x: np.ndarray  # X written at the start of each data line
    line_start: np.ndarray  # index (into y) of the point that X belongs to
    line_numbers: np.ndarray  # file line number of each data line
    form: str  # "AFFN" or "ASDF"
    missing: int = 0  # '?' ordinates (unknown values), decoded as NaN
    x_decimals: int = 0  # most decimals written in an abscissa (its rounding step)


def _where(source: str, line_no: int) -> str:
    return f"{source}: line {line_no:,}" if source else f"line {line_no:,}"


def is_affn_block(lines: list[str]) -> bool:
    """True if every line is plain decimals (exponents allowed, >= 2 numbers).

    Linear-time character test (a regular expression over whole lines can
    backtrack for minutes on a damaged line).
    """
    joined = "\n".join(lines)
    if "e" not in joined and "E" not in joined:
        return not _NOT_AFFN.search(joined)  # one pass; line counts are checked later
    for s in lines:
        if not s.strip():
            continue
        t = _EXPONENT.sub("", s)
        if _NOT_AFFN.search(t) or len(_AFFN_NUM.findall(s)) < 2:
            return False
    return True


def _ordinates_per_line(line_of: np.ndarray, pairs, source: str | None) -> np.ndarray:
    """Ordinates counted per data line; a line with none is an error that names it."""
    counts = np.bincount(line_of, minlength=len(pairs))
    if (counts == 0).any():
        text, line_no = pairs[int(np.argmax(counts == 0))]
        raise SpecmatchError(
            f"{_where(source, line_no)}: expected an abscissa followed by at least one "
            f"ordinate, found {text.strip()[:40]!r}")
    return counts


def decode_xy_lines(lines: list[str], line_numbers: list[int], *, source: str = "") -> DecodedLines:
    """Decode the data lines of an ``(X++(Y..Y))`` table in any ordinate form.

    Parameters
    ----------
    lines
        The data lines (without the ``##XYDATA=`` label line), comments removed.
    line_numbers
        The file line number of each entry of `lines`, for error messages.
    source
        File name for error messages.

    Returns
    -------
    DecodedLines
        Ordinates in file units (multiply by YFACTOR), and per-line abscissae for
        the X check.

    Raises
    ------
    SpecmatchError
        On a character that is not part of any form, a DIF or DUP with nothing
        before it, or a failed DIF Y-check; the message names the line.

    Notes
    -----
    Vectorised: tokens of all lines are classified at once (absolute, DIF, DUP);
    DUP counts become repeat counts, DIF runs a cumulative sum restarted at every
    absolute value, and a line's first value is the Y-check when the previous line
    ended in DIF form.
    """
    pairs = [(s, n) for s, n in zip(lines, line_numbers) if s.strip()]
    if not pairs:
        raise SpecmatchError(f"{source or 'file'}: the (X++(Y..Y)) table has no data lines")
    affn = is_affn_block([s for s, _ in pairs])
    nums = np.array([n for _, n in pairs], dtype=int)
    if affn and not any(("e" in t or "E" in t) for t, _ in pairs):
        fast = _tokenise_asdf(pairs, source)  # integers / PAC: the vectorised path
        if fast is not None:
            vals, _, line_of, xs = fast
            counts_a = _ordinates_per_line(line_of, pairs, source)
            starts = np.concatenate(([0], np.cumsum(counts_a)[:-1]))
            return DecodedLines(vals, _parse_x(xs, pairs, source), starts, nums, "AFFN",
                                int(np.isnan(vals).sum()), _decimals(xs))
    if affn:
        split_lines = [_AFFN_NUM.findall(text) for text, _ in pairs]
        xs, toks, counts = _split_x(split_lines, pairs, source)
        line_x = _parse_x(xs, pairs, source)
        missing = toks.count("?")
        vals = np.array([np.nan if t == "?" else t for t in toks] if missing else toks, dtype=float)
        counts_a = np.array(counts, dtype=int)
        starts = np.concatenate(([0], np.cumsum(counts_a)[:-1]))
        return DecodedLines(vals, line_x, starts, nums, "AFFN", missing, _decimals(xs))
    fast = _tokenise_asdf(pairs, source)
    if fast is not None:
        vals, kind, line_of, xs = fast
        counts_a = _ordinates_per_line(line_of, pairs, source)
    else:  # decimal points in compressed ordinates: token by token
        for text, line_no in pairs:
            m = _BAD_CHAR.search(text)
            if m:
                raise SpecmatchError(
                    f"{_where(source, line_no)}: character {m.group()!r} at column {m.start() + 1} "
                    "is not part of any JCAMP-DX ordinate form")
        split_lines = [_ASDF_TOKEN.findall(text) for text, _ in pairs]
        xs, toks, counts = _split_x(split_lines, pairs, source)
        counts_a = np.array(counts, dtype=int)
        heads = "".join([t[0] for t in toks])
        kind = np.frombuffer(heads.translate(_KIND).encode("latin-1", "replace"), dtype=np.uint8)
        head = _HEAD
        body = [head.get(t[0], t[0]) + t[1:] for t in toks]
        line_of = np.repeat(np.arange(len(pairs)), counts_a)
        try:
            vals = np.array(body, dtype=float)
        except ValueError:
            for k, b in enumerate(body):
                try:
                    float(b)
                except ValueError:
                    text, line_no = pairs[int(line_of[k])]
                    raise _bad_token(text, source, line_no) from None
            raise  # pragma: no cover
    line_x = _parse_x(xs, pairs, source)
    is_dif = kind == ord("d")
    is_dup = kind == ord("u")
    is_q = kind == ord("?")
    first_tok = np.concatenate(([0], np.cumsum(counts_a)[:-1]))
    # DUP: the preceding token occurs `count` times in all.
    reps = np.ones(len(vals), dtype=np.int64)
    if is_dup.any():
        k = np.flatnonzero(is_dup)
        bad = (k == 0) | is_dup[np.maximum(k - 1, 0)] | (line_of[np.maximum(k - 1, 0)] != line_of[k])
        cnt = vals[k]
        bad |= (cnt < 1) | (cnt != np.round(cnt))
        if bad.any():
            j = int(k[np.argmax(bad)])
            _, line_no = pairs[int(line_of[j])]
            raise SpecmatchError(
                f"{_where(source, line_no)}: a DUP count has no value before it on the line, "
                "or is not a positive whole number")
        reps[k - 1] = cnt.astype(np.int64)
        reps[k] = 0
    # The Y-check: a line following one that ended in DIF form starts with a repeat.
    last_tok = first_tok + counts_a - 1
    last_real = np.where(is_dup[last_tok], last_tok - 1, last_tok)
    ended_dif = is_dif[last_real]
    is_check = np.zeros(len(vals), dtype=bool)
    chk_lines = np.flatnonzero(ended_dif[:-1]) + 1
    if len(chk_lines):
        ft = first_tok[chk_lines]
        wrong = is_dif[ft] | is_dup[ft]
        if wrong.any():
            _, line_no = pairs[int(chk_lines[np.argmax(wrong)])]
            raise SpecmatchError(
                f"{_where(source, line_no)}: expected the DIF Y-check value (the last "
                "ordinate of the previous line, in SQZ form) at the start of the line")
        is_check[ft] = True
    keep = reps > 0
    e_vals = np.repeat(vals[keep], reps[keep])
    e_dif = np.repeat(is_dif[keep], reps[keep])
    e_check = np.repeat(is_check[keep], reps[keep])
    e_line = np.repeat(line_of[keep], reps[keep])
    is_abs = ~e_dif
    group = np.cumsum(is_abs) - 1
    if len(group) and group[0] < 0:
        _, line_no = pairs[int(e_line[0])]
        raise SpecmatchError(
            f"{_where(source, line_no)}: a DIF ordinate (difference) appears before any "
            "absolute ordinate")
    incr = np.where(e_dif, e_vals, 0.0)
    cs = np.cumsum(incr)
    abs_idx = np.flatnonzero(is_abs)
    y = e_vals[abs_idx][group] + (cs - cs[abs_idx][group])
    ci = np.flatnonzero(e_check)
    if len(ci):
        prev = y[ci - 1]
        ok = np.isclose(y[ci], prev, rtol=1e-9, atol=1e-6) | (np.isnan(y[ci]) & np.isnan(prev))
        if not ok.all():
            j = int(ci[np.argmax(~ok)])
            _, line_no = pairs[int(e_line[j])]
            raise SpecmatchError(
                f"{_where(source, line_no)}: DIF Y-check failed: the line starts with "
                f"{y[j]:g} but the previous line ended with {y[j - 1]:g}; the file is damaged "
                "or was edited")
    out = y[~e_check]
    # Index (into `out`) of the point each line's X belongs to.
    kept_before = np.concatenate(([0], np.cumsum(np.bincount(e_line[~e_check], minlength=len(pairs)))[:-1]))
    line_start = kept_before - np.isin(np.arange(len(pairs)), chk_lines).astype(int)
    return DecodedLines(out, line_x, line_start, nums, "ASDF", int(is_q.sum()), _decimals(xs))


def _split_x(split_lines, pairs, source):
    xs: list[str] = []
    toks: list[str] = []
    counts: list[int] = []
    for t, (text, line_no) in zip(split_lines, pairs):
        if len(t) < 2:
            raise SpecmatchError(
                f"{_where(source, line_no)}: expected an abscissa followed by at least one "
                f"ordinate, found {text.strip()[:40]!r}")
        xs.append(t[0])
        toks.extend(t[1:])
        counts.append(len(t) - 1)
    return xs, toks, counts


def _decimals(xs: list[str]) -> int:
    return max((len(x) - x.index(".") - 1 for x in xs if "." in x), default=0)


def _parse_x(xs: list[str], pairs, source: str) -> np.ndarray:
    try:
        return np.array(xs, dtype=float)
    except ValueError:
        for (text, line_no), xt in zip(pairs, xs):
            try:
                float(xt)
            except ValueError:
                raise SpecmatchError(
                    f"{_where(source, line_no)}: expected the abscissa (a plain number) at the "
                    f"start of the line, found {xt[:20]!r}") from None
        raise  # pragma: no cover


# Character classes for the vectorised ASDF tokeniser.
_C_SEP, _C_NL, _C_DIG, _C_DOT, _C_SQZ, _C_DIF, _C_DUP, _C_SIGN, _C_Q, _C_BAD = range(10)
_CLS = np.full(256, _C_BAD, dtype=np.uint8)
_DIGV = np.zeros(256, dtype=np.float64)
_SGNV = np.ones(256, dtype=np.float64)
for _c in " \t,;\r":
    _CLS[ord(_c)] = _C_SEP
_CLS[ord("\n")] = _C_NL
for _d in range(10):
    _CLS[ord(str(_d))] = _C_DIG
    _DIGV[ord(str(_d))] = _d
    for _tab, _cl, _sg in ((_SQZ_POS, _C_SQZ, 1.0), (_DIF_POS, _C_DIF, 1.0)):
        _CLS[ord(_tab[_d])] = _cl
        _DIGV[ord(_tab[_d])] = _d
    if _d:
        for _tab, _cl in ((_SQZ_NEG, _C_SQZ), (_DIF_NEG, _C_DIF), (_DUP, _C_DUP)):
            _CLS[ord(_tab[_d])] = _cl
            _DIGV[ord(_tab[_d])] = _d
        _SGNV[ord(_SQZ_NEG[_d])] = -1.0
        _SGNV[ord(_DIF_NEG[_d])] = -1.0
_CLS[ord(".")] = _C_DOT
_CLS[ord("+")] = _C_SIGN
_CLS[ord("-")] = _C_SIGN
_SGNV[ord("-")] = -1.0
_CLS[ord("?")] = _C_Q
_KIND_CODE = np.zeros(10, dtype=np.uint8)
_KIND_CODE[[_C_DIG, _C_SQZ, _C_SIGN]] = ord("a")
_KIND_CODE[_C_DIF] = ord("d")
_KIND_CODE[_C_DUP] = ord("u")
_KIND_CODE[_C_Q] = ord("?")
_X_HEAD = re.compile(r"\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)")
_X_LINE = re.compile(r"^[ \t]*[+-]?(?:\d+(?:\.\d*)?|\.\d+)", re.M)


def _tokenise_asdf(pairs: list[tuple[str, int]], source: str):
    """Values, kinds ('a', 'd', 'u', '?') and line index of all ordinate tokens, and
    the abscissa text of each line; in numpy.

    Each character is classified through a lookup table; a token starts at a
    pseudo-digit, a sign, a '?' or a digit after a blank, and its value is the sum
    of digit x 10^place. Returns None when ordinates carry decimal points (rare;
    the caller then parses token by token).
    """
    joined = "\n".join(t for t, _ in pairs)
    try:
        blob = joined.encode("ascii")
    except UnicodeEncodeError as exc:
        text, line_no = pairs[joined.count("\n", 0, exc.start)]
        return _raise_bad(text, source, line_no)
    a = np.frombuffer(blob, dtype=np.uint8)
    cls = _CLS[a].copy()
    nl_pos = np.flatnonzero(cls == _C_NL)
    bad = cls == _C_BAD
    if bad.any():
        j = int(np.argmax(bad))
        text, line_no = pairs[int(np.searchsorted(nl_pos, j))]
        return _raise_bad(text, source, line_no)
    # The abscissa: the first number of each line (optional sign, digits, point).
    n = len(a)
    line_starts = np.concatenate(([0], nl_pos + 1))
    nonsep = np.flatnonzero(cls != _C_SEP)
    first = nonsep[np.minimum(np.searchsorted(nonsep, line_starts), len(nonsep) - 1)]
    signed = cls[first] == _C_SIGN
    notnum = np.append(np.flatnonzero((cls != _C_DIG) & (cls != _C_DOT)), n)
    end = notnum[np.searchsorted(notnum, first + signed)]
    xs = [blob[f:e].decode() for f, e in zip(first.tolist(), end.tolist())]
    mark = np.zeros(n + 1, dtype=np.int32)
    mark[first] += 1  # one abscissa per line: indices are unique
    mark[end] -= 1
    cls[np.cumsum(mark[:-1]) > 0] = _C_SEP  # X characters are not ordinates
    if (cls == _C_DOT).any():
        return None
    prev = np.empty_like(cls)
    prev[0] = _C_SEP
    prev[1:] = cls[:-1]
    start = ((cls >= _C_SQZ) & (cls <= _C_Q)) | ((cls == _C_DIG) & (prev <= _C_NL))
    sidx = np.flatnonzero(start)
    carry_idx = np.flatnonzero((cls == _C_DIG) | ((cls >= _C_SQZ) & (cls <= _C_DUP)))
    ntok = len(sidx)
    # Digits of token t are carry_idx[b[t]:b[t+1]] (all digit-carrying characters
    # between two token starts belong to the first).
    b = np.searchsorted(carry_idx, sidx)
    lengths = np.diff(np.append(b, len(carry_idx)))
    kcls = cls[sidx]
    line_of = np.searchsorted(nl_pos, sidx)
    bad_tok = ((lengths == 0) & (kcls != _C_Q)) | ((lengths > 0) & (kcls == _C_Q)) | (lengths > 15)
    if bad_tok.any():
        j = int(np.argmax(bad_tok))
        text, line_no = pairs[int(line_of[j])]
        raise SpecmatchError(
            f"{_where(source, line_no)}: a sign, '?' or value is malformed (a sign with no digits, "
            "digits after '?', or more than 15 digits)")
    digits = _DIGV[a[carry_idx]]
    # Horner's rule, one digit place at a time over all tokens (at most 15 passes);
    # tokens sorted by length so each pass works on a prefix.
    order = np.argsort(-lengths, kind="stable")
    ls, bs = lengths[order], b[order]
    vs = np.zeros(ntok)
    for k in range(int(lengths.max(initial=0))):
        m = int(np.searchsorted(-ls, -k, side="left"))  # tokens longer than k
        vs[:m] = vs[:m] * 10.0 + digits[bs[:m] + k]
    vals = np.empty(ntok)
    vals[order] = vs
    vals *= _SGNV[a[sidx]]
    kind = _KIND_CODE[kcls]
    if (kcls == _C_Q).any():
        vals[kcls == _C_Q] = np.nan
    return vals, kind, line_of, xs


def _raise_bad(text: str, source: str, line_no: int):
    raise _bad_token(text, source, line_no)


def _bad_token(text: str, source: str, line_no: int) -> SpecmatchError:
    m = _BAD_CHAR.search(text)
    if m:
        what = f"character {m.group()!r} at column {m.start() + 1} is not part of any JCAMP-DX ordinate form"
    else:
        what = "a value is malformed (e.g. two decimal points, or a DUP count with a decimal point)"
    return SpecmatchError(f"{_where(source, line_no)}: {what}")


# --------------------------------------------------------------------------- encoding
def _sqz(v: int) -> str:
    s = str(abs(v))
    return (_SQZ_NEG if v < 0 else _SQZ_POS)[int(s[0])] + s[1:]


def _dif(v: int) -> str:
    s = str(abs(v))
    return (_DIF_NEG if v < 0 else _DIF_POS)[int(s[0])] + s[1:]


def _dup(n: int) -> str:
    s = str(n)
    return _DUP[int(s[0])] + s[1:]


def _fmt_x(x: float) -> str:
    s = f"{x:.6f}".rstrip("0").rstrip(".")
    return "0" if s in ("", "-0") else s


def encode_xy_lines(x: np.ndarray, y: np.ndarray, form: str = "DIFDUP") -> list[str]:
    """Encode integer ordinates `y` at abscissae `x` as ``(X++(Y..Y))`` lines.

    Parameters
    ----------
    x
        Abscissa of every point, in file units (already divided by XFACTOR).
    y
        Integer ordinates (already divided by YFACTOR and rounded).
    form
        One of AFFN, PAC, SQZ, DIF, DUP (SQZ with repeat counts), DIFDUP.

    Returns
    -------
    list of str
        Lines of at most 80 characters. DIF forms repeat the last ordinate of a line
        at the start of the next (the Y-check) and end with a check line.
    """
    form = form.upper()
    if form not in FORMS:
        raise SpecmatchError(f"unknown JCAMP-DX form {form!r}; use one of {', '.join(FORMS)}")
    yi = [int(v) for v in np.asarray(y).astype(np.int64)]
    n = len(yi)
    lines: list[str] = []
    dif = form in ("DIF", "DIFDUP")
    dup = form in ("DUP", "DIFDUP")
    i = 0
    while i < n:
        head = _fmt_x(float(x[i]))
        if form in ("AFFN", "PAC"):
            # AFFN separates ordinates by a space, PAC by their sign
            parts = [head]
            length = len(head)
            j = i
            while j < n:
                tok = (" " + str(yi[j]) if form == "AFFN"
                       else ("-" if yi[j] < 0 else "+") + str(abs(yi[j])))
                if length + len(tok) > MAX_LINE and j > i:
                    break
                parts.append(tok)
                length += len(tok)
                j += 1
            lines.append("".join(parts))
            i = j
            continue
        # SQZ-based forms: the first ordinate of a line is always SQZ.
        parts = [head, _sqz(yi[i])]
        length = len(parts[0]) + len(parts[1])
        j = i + 1
        ended_dif = False
        while j < n:
            if dif:
                d = yi[j] - yi[j - 1]
                k = 1
                if dup:
                    while j + k < n and yi[j + k] - yi[j + k - 1] == d:
                        k += 1
                tok = _dif(d) + (_dup(k) if k > 1 else "")
            else:
                v = yi[j]
                k = 1
                if dup:
                    while j + k < n and yi[j + k] == v:
                        k += 1
                tok = _sqz(v) + (_dup(k) if k > 1 else "")
            if length + len(tok) > MAX_LINE:
                if dup and k > 1:
                    # Shorten the run to what fits rather than leave the line short.
                    room = MAX_LINE - length
                    while k > 1:
                        k -= 1
                        tok = (_dif(d) if dif else _sqz(v)) + (_dup(k) if k > 1 else "")
                        if len(tok) <= room:
                            break
                    if len(tok) > room:
                        break
                else:
                    break
            parts.append(tok)
            length += len(tok)
            j += k
            ended_dif = dif
        lines.append("".join(parts))
        if dif and ended_dif:
            i = j - 1  # the next line repeats the last ordinate as the Y-check
            if j >= n:
                lines.append(_fmt_x(float(x[n - 1])) + _sqz(yi[n - 1]))
                break
        else:
            i = j
    return lines
