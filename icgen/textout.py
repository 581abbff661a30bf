"""Plain-text tables for the terminal."""


def format_table(headers, rows, title=None):
    """Right-aligned text table; ``rows`` are sequences of already-formatted strings."""
    cols = list(zip(headers, *rows)) if rows else [(h,) for h in headers]
    widths = [max(len(str(c)) for c in col) for col in cols]
    line = "  ".join("-" * w for w in widths)
    out = [title] if title else []
    out.append("  ".join(str(h).rjust(w) for h, w in zip(headers, widths)))
    out.append(line)
    out += ["  ".join(str(c).rjust(w) for c, w in zip(r, widths)) for r in rows]
    return "\n".join(out)


def fmt_mass(m):
    """Mass in Msun as '4.50e+10'."""
    return f"{m:.3e}"
