"""Channel lists as short text ("0-3, 8") and back."""

from __future__ import annotations


def channel_list(chans) -> str:
    """Compact text for a channel list: 0-3, 8, 12-13."""
    chans = sorted(int(c) for c in chans)
    parts, i = [], 0
    while i < len(chans):
        j = i
        while j + 1 < len(chans) and chans[j + 1] == chans[j] + 1:
            j += 1
        parts.append(str(chans[i]) if i == j else f"{chans[i]}-{chans[j]}")
        i = j + 1
    return ", ".join(parts)


def parse_channels(text: str, n_channels: int) -> list[int]:
    """Channels from text such as "0-3, 8"; each must lie in 0..n_channels-1."""
    out: list[int] = []
    for part in filter(None, (p.strip() for p in text.replace(";", ",").split(","))):
        lo, _, hi = part.partition("-")
        try:
            a, b = int(lo), int(hi or lo)
        except ValueError:
            raise ValueError(f"channels must be numbers or ranges like 0-3, got {part!r}") from None
        if not (0 <= a <= b < n_channels):
            raise ValueError(f"channels must lie in 0..{n_channels - 1}, got {part!r}")
        out.extend(range(a, b + 1))
    if not out:
        raise ValueError(f"channels must name at least one channel, got {text!r}")
    return out


def lane_name(recording, channel: int) -> str:
    """A trace's label: "ch 5", and on a probe the site's depth along it too ("ch 5 · 40 µm", with
    the shank when there are several: "ch 5 · s1 40 µm")."""
    if recording.positions is None:
        return f"ch {channel}"
    shank = f"s{int(recording.shank[channel])} " if len(set(recording.shank.tolist())) > 1 else ""
    return f"ch {channel} · {shank}{recording.positions[channel, 1]:g} µm"
