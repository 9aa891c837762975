"""envsample's primaries names and the colour-science colourspaces that hold the same published primaries."""

#: envsample primaries name -> colour-science colourspace name (ITU-R BT.709-6, ITU-R BT.2020-2,
#: Academy S-2014-004 ACEScg / AP1, SMPTE ST 2065-1 ACES2065-1 / AP0).
COLOUR_SPACES = {
    "bt709": "ITU-R BT.709",
    "bt2020": "ITU-R BT.2020",
    "acescg": "ACEScg",
    "aces2065-1": "ACES2065-1",
}
