"""Colour tags: how a stream's pixel values are to be read, parsed from ffmpeg and stamped back.

A stream's header may say its range (limited or full), YUV matrix, primaries and transfer
characteristic. They are read from ffmpeg's stream line (:func:`parse_colour`) and carried to
an output by ffmpeg's ``setparams`` filter (:meth:`ColourTags.setparams_filter`), so HLG, PQ
and wide-gamut footage keeps its meaning through a steadied copy.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["COLOUR_NAMES", "ColourTags", "parse_colour"]

#: Names the encoder side (ffmpeg's ``setparams`` filter) takes for each colour property, as
#: ffmpeg prints them for a stream. A name outside these is not copied to an output.
COLOUR_NAMES: dict[str, frozenset[str]] = {
    "range": frozenset({"tv", "pc"}),
    "space": frozenset({"bt709", "fcc", "bt470bg", "smpte170m", "smpte240m", "ycgco",
                        "bt2020nc", "bt2020c", "smpte2085", "chroma-derived-nc",
                        "chroma-derived-c", "ictcp"}),
    "primaries": frozenset({"bt709", "bt470m", "bt470bg", "smpte170m", "smpte240m", "film",
                            "bt2020", "smpte428", "smpte431", "smpte432", "ebu3213"}),
    "trc": frozenset({"bt709", "gamma22", "gamma28", "smpte170m", "smpte240m", "linear",
                      "log100", "log316", "iec61966-2-4", "bt1361e", "iec61966-2-1",
                      "bt2020-10", "bt2020-12", "smpte2084", "smpte428", "arib-std-b67"}),
}


@dataclass(frozen=True)
class ColourTags:
    """How a stream's pixel values are to be read, as its header says (None: not said).

    ``range`` is ``"tv"`` (limited: luma 16–235) or ``"pc"`` (full); ``space`` is the YUV
    matrix, ``primaries`` and ``trc`` (transfer characteristic) describe the light, in
    ffmpeg's names (``bt709``, ``bt2020nc``, ``arib-std-b67`` for HLG …).
    """

    range: str | None = None
    space: str | None = None
    primaries: str | None = None
    trc: str | None = None

    def setparams_filter(self) -> str | None:
        """An ffmpeg ``setparams`` filter stamping these tags on frames (the encoder writes
        them into the stream), or None when there is nothing to stamp. Unknown names are
        left out.

        Returns
        -------
        str or None : e.g. ``"setparams=range=tv:colorspace=bt709"``, or None.
        """
        parts = []
        for key, option in (("range", "range"), ("space", "colorspace"),
                            ("primaries", "color_primaries"), ("trc", "color_trc")):
            value = getattr(self, key)
            if value in COLOUR_NAMES[key]:
                parts.append(f"{option}={value}")
        return "setparams=" + ":".join(parts) if parts else None


_FIELD_ORDER = ("progressive", "top first", "bottom first", "top coded first",
                "bottom coded first")


def parse_colour(pix_fmt_details: str) -> ColourTags:
    """Colour tags from the parenthesis after the pixel format in ffmpeg's stream line, e.g.
    ``"tv, bt709, progressive"`` or ``"tv, bt2020nc/bt2020/arib-std-b67, progressive"``
    (one name stands for all three of matrix, primaries and transfer).

    Parameters
    ----------
    pix_fmt_details : the text inside the parenthesis, without it.

    Returns
    -------
    The tags found; ``unknown`` and ``reserved`` are read as not said (None).
    """
    tags: dict[str, str | None] = {}
    for item in (x.strip() for x in pix_fmt_details.split(",")):
        if not item or item.endswith("bpc") or item.startswith(_FIELD_ORDER):
            continue
        if item in COLOUR_NAMES["range"]:
            tags["range"] = item
            continue
        names = item.split("/")
        if len(names) == 1:
            names = names * 3
        if len(names) == 3:
            for key, name in zip(("space", "primaries", "trc"), names, strict=True):
                tags[key] = None if name in ("unknown", "reserved") else name
    return ColourTags(**tags)
