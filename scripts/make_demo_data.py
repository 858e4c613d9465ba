"""Generate the invented demo corpus: wind-farm maintenance reports tagged in IOB2.

The scenario is made up from start to finish: crews of an imaginary wind farm operator write short
service reports ("Crew B swapped the pitch bearing on T-14 after vibration hit 7.2 mm/s at the
Northfield site"). Four entity types are tagged:

    ASSET      turbine identifiers (T-14, WTG 07, Turbine 3) and site names (Cold Harrow Ridge)
    COMPONENT  parts of a turbine (pitch bearing, main shaft, gearbox HSS bearing inner race)
    DEFECT     what is wrong with them (oil leak, hairline crack, leading edge erosion)
    READING    a measured value with its unit (7.2 mm/s, 85°C, 1,450 rpm, 3.1 to 3.4 bar)

Sentences come from a small template language (``<a|b>`` picks one alternative, ``[x]`` is
optional, ``{SLOT}`` is filled by a generator) joined into clauses, then roughened: abbreviations,
typos, ALL CAPS or all-lower sentences, several number formats and units glued to or apart from
their numbers.  Component and defect names are mostly built from modifier + head pieces, the
rest are whole names with long-tailed frequencies.  A fixed share of the pairs, of the whole names
and of the site names is withheld from the training split and drawn often in dev and test, so a
tagger is scored on names it has never seen, most of them built from pieces it has.

Everything comes from one ``random.Random(seed)``: the same seed gives the same files, byte for
byte.  Run ``python scripts/make_demo_data.py`` (options ``--seed`` and ``--out``).

Beside the splits the script writes ``lexicon.tsv``, an invented parts-and-defects catalogue
(``name<TAB>COMPONENT`` or ``name<TAB>DEFECT``): the plain names the generator draws from, the
withheld ones included (so some occur only in dev and test), without the crews' shorthand, typos
or case changes, and with a seeded share left out, as a real catalogue is never complete.

It also writes ``unannotated.txt.gz``, the operator's archive of reports nobody annotated: about
40,000 fresh sentences from the same generator and name pools, as plain text with no labels, a
report a paragraph (its sentences one per line, a blank line after it). The withheld names occur
in it at their share of each pool, as names annotation happened to miss would; no sentence of
train, dev or test is repeated. Its sentences come from a ``random.Random`` of their own, seeded
from the same seed, so the annotated files stay as they were; the gzip header holds no file name
and no time, so the same seed gives the same bytes here too.
"""

from __future__ import annotations

import argparse
import gzip
import random
import re
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

DEFAULT_SEED = 20240611
DEFAULT_OUT = Path(__file__).resolve().parents[1] / "data" / "demo"
SPLIT_SIZES: dict[str, int] = {"train": 3000, "dev": 500, "test": 500}
TYPES: tuple[str, ...] = ("ASSET", "COMPONENT", "DEFECT", "READING")
MIN_TOKENS, MAX_TOKENS = 4, 45
# How often dev/test draw a name (and a site) from the held-out pool.
HELDOUT_DRAW = 0.5
HELDOUT_SITE_DRAW = 0.4
# Share of modifier + head pairs (per modifier) and of whole names withheld from train.
HELDOUT_FRACTION = 0.22
HELDOUT_SITES = 7
HELDOUT_POOLS = ("component_name", "component_pair", "defect_name", "defect_pair", "site")
# Share of catalogue names left out of the demo lexicon (drawn from a stream of its own).
LEXICON_DROP = 0.15
# The unannotated archive: reports of one to four sentences, about 40,000 sentences in all.
UNANNOTATED_FILE = "unannotated.txt.gz"
UNANNOTATED_SENTENCES = 40_000
REPORT_SIZES, REPORT_WEIGHTS = [1, 2, 3, 4], [35, 30, 22, 13]
LEXICON_HEADER = (
    "# Invented catalogue of turbine components and defects for the demo corpus.\n"
    "# Written by scripts/make_demo_data.py; one name per line: name<TAB>type.\n"
)

Segment = tuple[str, str | None]  # (text, entity type or None for outside)
Sentence = list[tuple[str, str]]  # [(token, IOB2 label)]

# ---------------------------------------------------------------------------------------------
# Tokenisation: the rules a simple rule-based tokeniser would apply, used for every text piece so
# entity boundaries always fall between tokens.
_L = r"[^\W\d_]"  # any letter
_NUM = r"(?:\d{1,3}(?:,\d{3})+(?:\.\d+)?|\d+(?:[.,]\d+)?|[.,]\d+)"
_TOKEN_RE = re.compile(
    "|".join(
        [
            r"\d{1,2}:\d{2}",  # clock time 08:40
            r"\d{1,2}/\d{1,2}(?:/\d{2,4})?",  # date 14/03 or 14/03/2024
            r"\d+(?:[.,]\d+)?-\d+(?:[.,]\d+)?",  # range 80-85 or part number 88-1204
            rf"-?{_NUM}(?:°[CFcf]?|%|{_L}+(?:/{_L}+)?)",  # number with its unit glued on: 85°C
            rf"-?{_NUM}",  # bare number 1,450 / 7,2 / .5 / -12
            r"°[CFcf]?",  # a degree unit on its own
            rf"{_L}+(?:['/-]{_L}+)*(?:-?\d+{_L}?)?",  # words, T-14, WTG07, mm/s, build-up
            r"\S",  # any other single character: punctuation
        ]
    )
)


def tokenise(text: str) -> list[str]:
    """Split ``text`` into tokens: numbers, ids and units stay whole, punctuation stands alone."""
    return _TOKEN_RE.findall(text)


# ---------------------------------------------------------------------------------------------
# Name pieces.  Combination names are (modifier, head) pairs; withheld pairs never reach train.

COMPONENT_GRID: dict[str, list[str]] = {
    "pitch": ["bearing", "drive", "motor", "drive motor", "cylinder", "accumulator", "encoder"]
    + ["controller", "battery", "gearbox"],
    "yaw": ["bearing", "drive", "motor", "drive motor", "brake", "gearbox", "encoder"]
    + ["ring gear", "brake caliper"],
    "main": ["bearing", "shaft", "frame", "coupling"],
    "generator": ["bearing", "DE bearing", "NDE bearing", "cooling fan", "slip ring", "winding"]
    + ["brushes", "coupling", "encoder", "rotor", "stator"],
    "gearbox": ["HSS bearing", "IMS bearing", "planet bearing", "oil pump", "oil filter"]
    + ["oil cooler", "sun gear", "planet carrier", "breather", "torque arm", "HSS shaft"]
    + ["ring gear"],
    "hydraulic": ["pump", "accumulator", "hose", "unit", "filter", "manifold", "valve", "cylinder"],
    "converter": ["cabinet", "fan", "IGBT module", "cooling pump", "fuse", "choke"],
    "blade": ["root bolts", "tip", "root", "lightning receptor", "bearing"],
    "tower": ["flange", "bolts", "ladder", "lift", "platform", "door seal"],
    "brake": ["disc", "pads", "caliper", "accumulator"],
    "cooling": ["fan", "pump", "radiator"],
    "nacelle": ["crane", "fan", "cover", "heater", "frame"],
}
# Optional sub-part appended to a head ending in the key word.
SUBPARTS: dict[str, list[str]] = {
    "bearing": ["seal", "housing", "inner race", "outer race", "cage", "grease line"],
    "motor": ["cable", "brake", "fan", "terminal box"],
    "pump": ["motor", "seal", "coupling"],
    "fan": ["motor"],
    "shaft": ["seal", "coupling"],
    "flange": ["bolts"],
    "accumulator": ["valve"],
}
# Whole names drawn with a long-tailed (Zipf-like) frequency, as in real reports: a few are
# everywhere, many are rare.  Some contain words no combination uses.
SINGLE_COMPONENTS: list[str] = [
    "gearbox", "generator", "anemometer", "wind vane", "transformer", "switchgear", "spinner",
    "hub", "slip ring", "rotor lock pin", "service lift", "top box", "yaw ring", "aviation light",
    "ice detector", "UPS", "smoke detector", "climb assist", "fall arrest rail", "cable loop",
    "power cables", "earthing strap", "heat exchanger", "grease pump", "lubrication pump",
    "auto-lube unit", "dehumidifier", "rotor brake", "shrink disc", "torque limiter", "bedplate",
    "hub controller", "vibration sensor", "temperature sensor", "PT100 sensor",
    "proximity switch", "limit switch", "ultrasonic anemometer", "azimuth sensor", "contactor",
    "circuit breaker", "main breaker", "crowbar", "DC link capacitor", "capacitor bank",
    "line reactor", "MV cable", "LV cable", "drive train", "low speed shaft", "rotor hub",
    "fibre optic cable", "cooling water pump", "spinner bolts", "nose cone",
]  # fmt: skip
# Where on the turbine: part of the COMPONENT span ("rear main bearing").
POSITIONS = ["rear", "front", "upwind", "downwind", "upper", "lower", "left-hand", "right-hand"]
# State words before a component: outside the span ("the new pitch bearing").
STATES = ["new", "old", "spare", "failed", "replacement", "original", "faulty", "refurbished"]
# Hedges before a defect: outside the span ("suspected oil leak").
HEDGES = ["possible", "suspected", "some", "probable", "visible", "early signs of"]

# Defect groups: (modifiers, heads, may take a severity word in front).
DEFECT_GROUPS: list[tuple[list[str], list[str], bool]] = [
    (["oil", "grease", "coolant", "hydraulic", "gear oil", "hydraulic oil"],
     ["leak", "leakage", "seepage"], True),
    (["hairline", "fatigue", "surface", "radial", "weld", "root", "paint"],
     ["crack", "cracks", "cracking", "fracture"], True),
    (["surface", "heavy", "light", "localised", "extensive", "early stage"],
     ["pitting", "corrosion", "wear", "spalling", "micropitting", "scoring", "fretting", "rust"],
     False),
    (["leading edge", "trailing edge", "tip", "blade", "root"],
     ["erosion", "damage", "delamination", "cracking", "split"], True),
    (["abnormal", "excessive", "grinding", "intermittent", "high-pitched"],
     ["noise", "vibration", "knocking"], False),
    (["insulation", "cable", "winding", "earth"], ["breakdown", "damage", "fault"], False),
    (["chipped", "broken", "cracked", "worn"], ["tooth", "teeth"], False),
]  # fmt: skip
SINGLE_DEFECTS: list[str] = [
    "overheating", "misalignment", "looseness", "backlash", "arcing", "ice build-up",
    "water ingress", "lightning damage", "bolt loosening", "cable twist", "white etching cracks",
    "pitting", "crack", "leak", "corrosion", "erosion", "wear", "discolouration",
    "contamination", "excessive play", "imbalance", "seized rollers", "blistering", "chalking",
    "flaking paint", "gel coat cracking", "burn marks", "scorch marks", "overspeed",
    "overvoltage", "loose connection", "frayed cable", "chafing", "kinked hose",
    "grease starvation", "oil foaming", "sludge", "condensation", "false brinelling",
    "electrical fluting", "smearing", "indentation", "missing bolts", "weld porosity", "dents",
    "gouges", "pinholes", "bearing creep", "metal particles", "rubbing marks", "heat damage",
    "brush wear", "edge chipping",
]  # fmt: skip
SEVERITY = ["minor", "severe", "slight", "significant", "major"]

# Invented site names.  "Bearing Hill" puts a component word inside an ASSET on purpose.
SITES: list[str] = [
    "Northfield", "Cold Harrow Ridge", "Maren Flats", "Bearing Hill", "Skellbrook",
    "Quillon Ridge", "Osterby Flats", "Caddow Moss", "Tarnwick", "Hollin Edge",
    "Greyvane Point", "Larkspur Rise", "Windle Bank", "Mossgrave", "Dunmarrow", "Thistlecombe",
    "Kelp Reach", "Stannow Top", "Ferrowby", "Brindle Moor", "Gannet Shoal", "Sallow Down",
]  # fmt: skip
ALWAYS_TRAIN_SITES = ("Northfield", "Bearing Hill")

# Word-level shorthand used by the crews (long form -> short forms).
ABBREVIATIONS: dict[str, tuple[float, list[str]]] = {
    "bearing": (0.25, ["brg"]),
    "gearbox": (0.25, ["gbx"]),
    "generator": (0.2, ["gen"]),
    "hydraulic": (0.2, ["hyd"]),
    "converter": (0.1, ["conv"]),
    "HSS": (0.2, ["high speed shaft", "high-speed shaft"]),
    "IMS": (0.15, ["intermediate shaft"]),
    "DE": (0.15, ["drive end"]),
    "NDE": (0.15, ["non-drive end"]),
    "leading edge": (0.2, ["LE"]),
    "trailing edge": (0.15, ["TE"]),
}


@dataclass(frozen=True)
class ReadingKind:
    """One measured quantity: the words that name it, its unit(s) and a plausible value range."""

    names: tuple[str, ...]
    units: tuple[str, ...]
    low: float
    high: float
    decimals: tuple[int, ...]


READING_KINDS: dict[str, ReadingKind] = {
    "vib": ReadingKind(("vibration", "vib", "vibration level", "RMS velocity"), ("mm/s",), 0.4, 14,
                       (1, 1, 2)),
    "acc": ReadingKind(("acceleration", "peak accel"), ("g",), 0.05, 3.5, (2,)),
    "temp": ReadingKind(("temp", "temperature", "oil temp", "bearing temp", "winding temp"),
                        ("°C",), 18, 118, (0, 0, 1)),
    "amb": ReadingKind(("ambient", "ambient temp", "outside temp"), ("°C",), -15, 32, (0,)),
    "genrpm": ReadingKind(("speed", "gen speed", "generator speed", "HSS speed"), ("rpm",),
                          900, 1850, (0,)),
    "rotrpm": ReadingKind(("rotor speed",), ("rpm",), 5, 18, (1,)),
    "pres": ReadingKind(("pressure", "oil pressure", "hyd pressure", "system pressure",
                         "precharge"), ("bar",), 1.2, 230, (0, 1)),
    "kv": ReadingKind(("voltage", "grid voltage", "MV side"), ("kV",), 10, 34, (0, 1)),
    "volt": ReadingKind(("voltage", "supply voltage", "DC link", "battery voltage"), ("V",),
                        24, 1100, (0,)),
    "amp": ReadingKind(("current", "motor current", "phase current"), ("A",), 2, 1400, (0, 1)),
    "kw": ReadingKind(("output", "power", "active power"), ("kW",), 40, 3600, (0,)),
    "mw": ReadingKind(("output", "power"), ("MW",), 0.2, 4.2, (1, 2)),
    "gap": ReadingKind(("gap", "clearance", "play", "wear depth", "crack length", "axial play",
                        "pad thickness"), ("mm",), 0.05, 12, (1, 2)),
    "um": ReadingKind(("runout", "film thickness", "axial displacement"), ("µm",), 5, 250, (0,)),
    "rh": ReadingKind(("humidity", "RH"), ("%",), 20, 98, (0,)),
    "lvl": ReadingKind(("oil level", "level", "fill level", "charge"), ("%",), 8, 100, (0,)),
    "nm": ReadingKind(("torque",), ("Nm",), 150, 3800, (0,)),
    "knm": ReadingKind(("torque",), ("kNm",), 1, 12, (1,)),
    "wind": ReadingKind(("wind", "wind speed"), ("m/s",), 2, 14, (0, 1)),
    "gust": ReadingKind(("gusts", "peak gust"), ("m/s",), 15, 34, (0, 1)),
    "hz": ReadingKind(("frequency", "grid freq"), ("Hz",), 49.6, 50.4, (1, 2)),
    "ppm": ReadingKind(("particle count", "water content"), ("ppm",), 5, 650, (0,)),
    "mohm": ReadingKind(("insulation resistance", "IR", "megger reading"), ("MΩ",), 2, 4000,
                        (0,)),
    "ang": ReadingKind(("pitch angle", "yaw error", "blade angle"), ("°",), 0, 88, (0, 1)),
}  # fmt: skip
# Kinds that make sense when read off a component.
COMPONENT_KINDS = ("vib", "acc", "temp", "genrpm", "pres", "amp", "gap", "um", "mohm", "lvl")
# How often the unit is glued to the number ("85°C") instead of standing apart ("85 °C").
GLUE_RATE: dict[str, float] = {"%": 0.75, "°": 1.0, "°C": 0.5}
DEFAULT_GLUE_RATE = 0.12
# Other ways crews write the same unit (never glued to the number).
UNIT_SPELLINGS: dict[str, list[str]] = {
    "°C": ["deg C", "degrees", "degC"],
    "mm/s": ["mm/sec"],
    "rpm": ["RPM", "r/min"],
    "kV": ["KV", "kv"],
    "kW": ["KW", "kw"],
    "m/s": ["m/sec", "mps"],
    "Nm": ["N-m", "NM"],
    "bar": ["barg", "Bar"],
    "mm": ["MM", "millimetres"],
}

# ---------------------------------------------------------------------------------------------
# The template language: <a|b|c> one of, [x] optional, {SLOT} a generated piece, other text is
# literal and outside any entity.


@dataclass(frozen=True)
class _Lit:
    text: str


@dataclass(frozen=True)
class _Slot:
    name: str


@dataclass(frozen=True)
class _Alt:
    options: tuple[tuple[object, ...], ...]


@dataclass(frozen=True)
class _Opt:
    body: tuple[object, ...]


def _parse(template: str) -> tuple[object, ...]:
    """Parse a template into a tree of literals, slots, alternatives and optional parts."""

    def seq(i: int, stops: str) -> tuple[tuple[object, ...], int]:
        items: list[object] = []
        text: list[str] = []

        def flush() -> None:
            if text:
                items.append(_Lit("".join(text)))
                text.clear()

        while i < len(template) and template[i] not in stops:
            ch = template[i]
            if ch == "{":
                flush()
                end = template.index("}", i)
                items.append(_Slot(template[i + 1 : end]))
                i = end + 1
            elif ch == "<":
                flush()
                options: list[tuple[object, ...]] = []
                while True:
                    body, i = seq(i + 1, "|>")
                    options.append(body)
                    if template[i] == ">":
                        break
                items.append(_Alt(tuple(options)))
                i += 1
            elif ch == "[":
                flush()
                body, i = seq(i + 1, "]")
                items.append(_Opt(body))
                i += 1
            else:
                text.append(ch)
                i += 1
        flush()
        return tuple(items), i

    tree, end = seq(0, "")
    if end != len(template):
        raise ValueError(f"unbalanced template: {template!r}")
    return tree


# Clause templates with weights.  Entity slots: X component, D defect, XD either, A turbine (now
# and then with its site), T turbine, SITE site, BLADE "blade B", R reading of any kind, RX a
# reading one takes off a component, RK_<kind>
# a reading of that kind, RS_<kind> a single value of that kind, QR quantity + link + reading, RQ
# reading + quantity, XQR component + quantity + reading.  The other slots (CREW, VPAST, N, WO,
# SPEC, ...) fill in words outside any entity; see Generator.fillers.
CLAUSES: list[tuple[int, str]] = [
    (6, "{CREW} {VPAST} the {X} on {A}"),
    (4, "{CREW} {VPAST} the {X}[ on {A}] after {QR}"),
    (3, "{VPAST} <the |>{X} on {A}"),
    (4, "{X} {VPASS}[ on {A}]"),
    (3, "{A}: {X} {VPASS}"),
    (3, "{A} - {X} {VPASS} <due to|because of|after finding> {D}"),
    (5, "found {D} on the {X}"),
    (3, "found {D} <on|in|at> the {X}[ of {A}]"),
    (4, "{D} <observed|noted|found|seen|confirmed|reported> <on|at|in> <the |>{X}"),
    (4, "{X} <showing|shows|has|with> <signs of |>{D}"),
    (3, "{X} {D}"),
    (3, "{A} {X} {D}"),
    (3, "{A} {X}: {D}"),
    (2, "{X}: {D}, {QR}"),
    (5, "{QR}"),
    (5, "{XQR}"),
    (2, "measured {RX} on the {X}"),
    (2, "{RQ} <on|at> the {X}"),
    (3, "<after|when> {QR}"),
    (3, "<due to|because of|caused by> {D}"),
    (3, "checked {X}, {X} and {X}"),
    (2, "checked {X} and {X}[: <all OK|no issues|nothing found>]"),
    (2, "no {D} <found|seen> on <the |>{X}"),
    (1, "no {D}, {D} or {D} <found|seen>"),
    (3, "{A} <back in service|restarted|online|released to service|returned to service>"),
    (2, "{A} <stopped|tripped|down> on <fault |>{FAULT}"),
    (2, "{A} derated to {RK_kw}"),
    (1, "{A} limited to {RK_mw}"),
    (2, "<torqued|tensioned> <the |>{X} to {RK_nm}"),
    (1, "<torqued|tensioned> <the |>{X} to {RK_knm}"),
    (2, "{X} <gap|clearance|play|wear depth> {RK_gap}[ (limit {RK_gap})]"),
    (2, "ambient {RK_amb}, wind {RK_wind}"),
    (2, "wind {RK_wind}[ gusting {RK_gust}]"),
    (2, "{X} replaced under {WO}"),
    (1, "recommend replacing <the |>{X} within {N} weeks"),
    (2, "{X} temp <went|moved|changed> from {RS_temp} to {RS_temp}"),
    (2, "oil sample taken from <the |>{X}[, particle count {RK_ppm}]"),
    (2, "photos of <the |>{XD} <uploaded|attached|sent to engineering>"),
    (1, "see notes on <the |>{XD}"),
    (1, "<follow up|FU> on {XD}[ at {A}]"),
    (2, "{XD} <logged|reported|recorded> in {WO}"),
    (1, "{A} - {XD} - {XD}"),
    (1, "{XD} <photographed|documented|marked up>"),
    (2, "<job|task|inspection> {PCT} <complete|done>"),
    (1, "{PCT} of <the |>bolts <checked|marked>"),
    (1, "<tools|spares> left on level {N}"),
    (2, "used the {SPEC}[ on <the |>{X}]"),
    (1, "<booked|ordered> a {SPEC} for {A}"),
    (2, "leak <test|check> on <the |>{X} passed"),
    (2, "{D} on <the |>{X} <worse than last visit|unchanged|progressing|stable>"),
    (2, "{X} and {X} {VPASS}"),
    (1, "rotor locked, {X} {VPASS}"),
    (2, "ordered <a new|new|a spare> {X} (part no. {PARTNO})"),
    (2, "<insulation resistance|megger reading> {RK_mohm} on <the |>{X}"),
    (2, "{X} running at {RK_genrpm}"),
    (1, "sent <the |>{X} <to the workshop|for analysis|back to stores>"),
    (3, "{VIMP} <the |>{X}[ on {A}][ <asap|next visit|before restart>]"),
    (2, "{VIMP} the {X} for {D}"),
    (1, "monitor <the |>{X} <temp|vibration>"),
    (1, "cracked on with the {X} <swap|change|inspection>"),
    (2, "had to crack open the <hatch|roof hatch|access panel>"),
    (1, "<left|kept> spare T-shirts in the van"),
    (2, "{N} technicians on site"),
    (1, "crew of {N}, {N} climbs"),
    (2, "waited {N} <min|hrs> for wind to drop below {RK_wind}"),
    (2, "{WO} <raised|closed|opened|updated>[ for {A}]"),
    (1, "bearing in mind the forecast, <postponed|cancelled> the climb"),
    (1, "wear full PPE <in the nacelle|when climbing>"),
    (1, "applied corrosion inhibitor to <the |>{X}"),
    (1, "ran pitch test on {A}"),
    (2, "pitch angle {RK_ang} on {BLADE}"),
    (2, "{A} and {A} <inspected|checked|serviced>"),
    (1, "{A}, {A} and {A} <inspected|done|complete>"),
    (1, "readings: {R}, {R}, {R}"),
    (2, "{X} <OK|fine|within limits|good>"),
    (2, "turbine <restarted|stopped|reset>[ remotely] at {TIME}"),
    (1, "the unit <was reset|restarted>"),
    (1, "<signed off|handed over> to <night shift|day shift|ops>"),
    (1, "<left|parked> {A} in service mode"),
    (2, "<visual|borescope|drone|ultrasonic> inspection of <the |>{X} <found|showed|revealed> {D}"),
    (1, "<visual|borescope|drone> inspection of the {X} at {A}"),
    (2, "{D} <found|detected> during <borescope|drone|visual> inspection[ of <the |>{X}]"),
    (2, "{X} <seized|jammed|stuck|tripped|failed>"),
    (1, "{X} failed at {RX}"),
    (2, "{X} <alarm|warning> at {RX}"),
    (1, "{X} <over temp|overtemp> <alarm|fault> ({RK_temp})"),
    (1, "<torque|tension> check on <the |>{X}: {N} of {N} OK"),
    (1, "{X} <vibration|temp> <high|elevated|normal>"),
    (1, "{X} from {A} <fitted|installed> on {A}"),
    (1, "swapped <the |>{X} between {A} and {A}"),
    (1, "{SITE} {T} {X} {VPASS}"),
    (2, "{BLADE} <has|shows|with> {D}"),
    (1, "<vibration|temp|pressure> <normal|stable|OK> after restart"),
    (1, "{N} bolts <replaced|re-torqued> on <the |>{X}"),
]
# Places and times that may end a sentence.
TAILS: list[tuple[int, str]] = [
    (4, "at the {SITE} site"),
    (3, "at {SITE}"),
    (2, "<at|on> {SITE} wind farm"),
    (1, "({SITE})"),
    (1, "on {DATE}"),
    (1, "at {TIME}"),
    (1, "<as planned|per procedure|for now|asap>"),
    (1, "(see {WO})"),
    (1, "- <monitor|TBC|see photos>"),
]
CONNECTORS = [",", ";", "and", ", then", "-", "but", ", so", ", also", "+", "."]
CONNECTOR_WEIGHTS = [30, 10, 15, 8, 8, 4, 4, 5, 3, 3]
# Tools described by a rating: a value with a unit that is not a READING.
TOOL_SPECS = ["50 t crane", "120 t crane", "10 m sling", "5 m sling", "18 V drill", "24 V drill",
              "1,000 Nm torque wrench", "500 Nm torque wrench", "5 kV megger", "1 kV megger",
              "3 bar blower", "200 bar hand pump", "12 V lamp"]  # fmt: skip
CREWS = ["Crew A", "Crew B", "Crew C", "crew D", "Night crew", "Team 2", "We", "Techs",
         "The day shift", "Both techs", "RK and JM", "Contractor crew",
         "Crew B and Crew C"]  # fmt: skip
COUNTS = [1, 2, 2, 3, 3, 4, 5, 6, 8, 12, 24, 30, 45]  # technicians, climbs, hours, weeks...
PERCENTS = [10, 25, 50, 75, 80, 90]  # progress, not a READING
VPAST = ["replaced", "swapped", "changed out", "re-greased", "greased", "inspected", "checked",
         "cleaned", "re-torqued", "tightened", "adjusted", "realigned", "repaired", "refilled",
         "reset", "tested", "lubricated", "rewired", "calibrated", "flushed", "fitted a new",
         "removed"]  # fmt: skip
VPASS = ["replaced", "swapped", "changed", "greased", "inspected", "checked", "cleaned",
         "re-torqued", "adjusted", "repaired", "refilled", "tested", "OK", "done", "fitted",
         "removed", "isolated", "renewed"]  # fmt: skip
VIMP = ["replace", "check", "inspect", "re-torque", "clean", "recheck", "grease", "order",
        "monitor", "swap", "flush"]  # fmt: skip
PREFIXES: list[tuple[int, str]] = [
    (4, "{TIME} -"), (2, "({TIME})"), (3, "Note:"), (2, "NB:"), (2, "Update:"), (2, "Day {N}:"),
    (2, "{WO}:"), (2, "Shift {N} -"), (2, "{DATE} -"), (1, "Follow-up:"), (1, "Obs:"),
    (2, "Re {A}:"),
]  # fmt: skip


class _Zipf:
    """Names drawn with weight 1/rank: the first few are common, the tail is rare."""

    def __init__(self, names: list[str]) -> None:
        self.names = names
        self.weights = [1.0 / (rank + 1) for rank in range(len(names))]

    def draw(self, rng: random.Random) -> str:
        return rng.choices(self.names, weights=self.weights)[0]


def _outside(text: str) -> list[Segment]:
    return [(text, None)]


_Table = tuple[list[tuple[object, ...]], list[int]]  # parsed templates and their weights


def _slot_names(tree: tuple[object, ...]) -> list[str]:
    """Every slot name in a parsed template."""
    names: list[str] = []
    for item in tree:
        if isinstance(item, _Slot):
            names.append(item.name)
        elif isinstance(item, _Alt):
            for option in item.options:
                names += _slot_names(option)
        elif isinstance(item, _Opt):
            names += _slot_names(item.body)
    return names


def _parse_table(table: Sequence[tuple[int, str]]) -> _Table:
    return [_parse(t) for _, t in table], [w for w, _ in table]


class Generator:
    """Draws sentences; ``heldout`` says whether withheld names may be drawn (dev and test)."""

    def __init__(self, rng: random.Random, draws: random.Random | None = None) -> None:
        """Name pools come from ``rng``; sentences from ``draws`` if given, else from ``rng`` too
        (a second stream keeps the pools, and the splits drawn from ``rng``, unchanged)."""
        self.rng = rng
        self.heldout = False
        # How often each pool's withheld names are drawn once ``heldout`` is on: dev and test
        # draw them often, so a score says much about unseen names; `archive` lowers the rates.
        self.heldout_rates: dict[str, float] = dict.fromkeys(HELDOUT_POOLS, HELDOUT_DRAW)
        self.heldout_rates["site"] = HELDOUT_SITE_DRAW
        self.components, self.heldout_components = self._split_pairs(
            [(m, h) for m, heads in COMPONENT_GRID.items() for h in heads]
        )
        defect_pairs = [
            (m, h, sev) for mods, heads, sev in DEFECT_GROUPS for m in mods for h in heads
        ]
        train_d, held_d = self._split_pairs([(m, h) for m, h, _ in defect_pairs])
        severity = {(m, h): sev for m, h, sev in defect_pairs}
        self.defects = [(m, h, severity[m, h]) for m, h in train_d]
        self.heldout_defects = [(m, h, severity[m, h]) for m, h in held_d]
        candidates = [s for s in SITES if s not in ALWAYS_TRAIN_SITES]
        self.heldout_sites = sorted(rng.sample(candidates, HELDOUT_SITES))
        self.sites = [s for s in SITES if s not in self.heldout_sites]
        self.single_components, self.heldout_single_components = self._split_singles(
            SINGLE_COMPONENTS
        )
        self.single_defects, self.heldout_single_defects = self._split_singles(SINGLE_DEFECTS)
        if draws is not None:
            self.rng = draws
        self.clauses = _parse_table(CLAUSES)
        self.prefixes = _parse_table(PREFIXES)
        self.tails = _parse_table(TAILS)
        rng = self.rng
        self.fillers: dict[str, Callable[[], list[Segment]]] = {
            "X": self.component_segments,
            "D": self.defect_segments,
            "XD": lambda: rng.choice([self.component_segments, self.defect_segments])(),
            "A": self.asset_segments,
            "T": lambda: [(self.turbine(), "ASSET")],
            "SITE": lambda: [(self.site(), "ASSET")],
            "BLADE": lambda: [(self.blade(), "COMPONENT")],
            "R": lambda: [(self.reading(rng.choice(sorted(READING_KINDS))), "READING")],
            "RX": lambda: [(self.reading(rng.choice(COMPONENT_KINDS)), "READING")],
            "QR": self.quantity_reading,
            "XQR": self.component_reading,
            "RQ": self.reading_quantity,
            "CREW": lambda: _outside(rng.choice(CREWS)),
            "VPAST": lambda: _outside(rng.choice(VPAST)),
            "VPASS": lambda: _outside(rng.choice(VPASS)),
            "VIMP": lambda: _outside(rng.choice(VIMP)),
            "SPEC": lambda: _outside(rng.choice(TOOL_SPECS)),
            "N": lambda: _outside(str(rng.choice(COUNTS))),
            "PCT": lambda: _outside(f"{rng.choice(PERCENTS)}{rng.choice(['%', ' %'])}"),
            "WO": lambda: _outside(f"WO-{rng.randint(1000, 9999)}"),
            "PARTNO": lambda: _outside(f"{rng.randint(10, 99)}-{rng.randint(1000, 9999)}"),
            "TIME": lambda: _outside(f"{rng.randint(5, 19):02d}:{rng.randrange(0, 60, 5):02d}"),
            "DATE": lambda: _outside(self.date()),
            "FAULT": lambda: _outside(self.fault_code()),
        }

        for table in (self.clauses, self.prefixes, self.tails):
            for tree in table[0]:
                unknown = [n for n in _slot_names(tree) if not self._known_slot(n)]
                if unknown:
                    raise ValueError(f"template uses unknown slots {unknown}")

    def _known_slot(self, name: str) -> bool:
        if name.startswith(("RK_", "RS_")):
            return name[3:] in READING_KINDS
        return name in self.fillers

    # -- name pools -------------------------------------------------------------------------
    def _split_pairs(
        self, pairs: list[tuple[str, str]]
    ) -> tuple[list[tuple[str, str]], list[tuple[str, str]]]:
        """Withhold a fixed share of the pairs, at least one per modifier with 3+ heads."""
        held: list[tuple[str, str]] = []
        by_mod: dict[str, list[tuple[str, str]]] = {}
        for pair in pairs:
            by_mod.setdefault(pair[0], []).append(pair)
        for group in by_mod.values():
            if len(group) >= 3:
                k = max(1, round(HELDOUT_FRACTION * len(group)))
                held.extend(self.rng.sample(group, k))
        kept = [p for p in pairs if p not in held]
        return kept, [p for p in pairs if p in held]

    def _split_singles(self, names: list[str]) -> tuple[_Zipf, _Zipf]:
        """Withhold a share of whole names; the rest get long-tailed weights in a random order."""
        held = sorted(self.rng.sample(names, round(HELDOUT_FRACTION * len(names))))
        kept = [n for n in names if n not in held]
        self.rng.shuffle(kept)
        return _Zipf(kept), _Zipf(held)

    def _use_heldout(self, pool: str) -> bool:
        return self.heldout and self.rng.random() < self.heldout_rates[pool]

    def archive(self) -> None:
        """Draw withheld names as often as any other: each pool's withheld share of its names,
        as in an operator's archive, where the names annotation happened to miss are no rarer."""
        self.heldout = True
        pools = {
            "component_name": (self.single_components.names, self.heldout_single_components.names),
            "component_pair": (self.components, self.heldout_components),
            "defect_name": (self.single_defects.names, self.heldout_single_defects.names),
            "defect_pair": (self.defects, self.heldout_defects),
            "site": (self.sites, self.heldout_sites),
        }
        for pool, (kept, held) in pools.items():
            self.heldout_rates[pool] = len(held) / (len(kept) + len(held))

    # -- surface forms ------------------------------------------------------------------------
    def roughen(self, phrase: str) -> str:
        """Apply crew shorthand and the odd typo to an entity phrase."""
        for long, (rate, shorts) in ABBREVIATIONS.items():
            if re.search(rf"\b{long}\b", phrase) and self.rng.random() < rate:
                phrase = re.sub(rf"\b{long}\b", self.rng.choice(shorts), phrase)
        phrase = phrase.replace("shaft shaft", "shaft")  # "HSS shaft" spelt out
        words = [self.typo(w) if self.rng.random() < 0.04 else w for w in phrase.split(" ")]
        phrase = " ".join(words)
        if self.rng.random() < 0.04:
            phrase = phrase.title()
        return phrase

    def typo(self, word: str) -> str:
        """Swap, drop or double one inner letter of a word of five letters or more."""
        if len(word) < 5 or not word.isalpha():
            return word
        i = self.rng.randint(1, len(word) - 3)
        kind = self.rng.randrange(3)
        if kind == 0:
            return word[:i] + word[i + 1] + word[i] + word[i + 2 :]
        if kind == 1:
            return word[:i] + word[i + 1 :]
        return word[:i] + word[i] + word[i:]

    def component_segments(self) -> list[Segment]:
        """A component, sometimes after a state word that stays outside the span."""
        segments: list[Segment] = []
        if self.rng.random() < 0.08:
            segments.append((self.rng.choice(STATES), None))
        return [*segments, (self.component(), "COMPONENT")]

    def defect_segments(self) -> list[Segment]:
        """A defect, sometimes after a hedge that stays outside the span."""
        segments: list[Segment] = []
        if self.rng.random() < 0.1:
            segments.append((self.rng.choice(HEDGES), None))
        return [*segments, (self.defect(), "DEFECT")]

    def component(self) -> str:
        # A position word goes in front of short names only, keeping spans to five tokens.
        position = f"{self.rng.choice(POSITIONS)} " if self.rng.random() < 0.07 else ""
        if self.rng.random() < 0.3:
            held = self._use_heldout("component_name")
            pool = self.heldout_single_components if held else self.single_components
            return self._place(position, self.roughen(pool.draw(self.rng)))
        held = self._use_heldout("component_pair")
        pool = self.heldout_components if held else self.components
        modifier, head = self.rng.choice(pool)
        words = f"{modifier} {head}"
        last = head.split(" ")[-1]
        if last in SUBPARTS and self.rng.random() < 0.14:
            words = f"{words} {self.rng.choice(SUBPARTS[last])}"
        phrase = self.roughen(words)
        if len(phrase.split(" ")) > 5:  # an expanded abbreviation made it too long
            phrase = self.roughen(f"{modifier} {head}")
        return self._place(position, phrase)

    @staticmethod
    def _place(position: str, phrase: str) -> str:
        return position + phrase if phrase.count(" ") < 4 else phrase

    def blade(self) -> str:
        return f"{self.rng.choice(['blade', 'Blade', 'blade', 'BLADE'])} {self.rng.choice('ABC')}"

    def defect(self) -> str:
        if self.rng.random() < 0.35:
            held = self._use_heldout("defect_name")
            pool = self.heldout_single_defects if held else self.single_defects
            return self.roughen(pool.draw(self.rng))
        pool = self.heldout_defects if self._use_heldout("defect_pair") else self.defects
        modifier, head, takes_severity = self.rng.choice(pool)
        phrase = f"{modifier} {head}"
        if takes_severity and self.rng.random() < 0.18:
            phrase = f"{self.rng.choice(SEVERITY)} {phrase}"
        return self.roughen(phrase)

    def site(self) -> str:
        pool = self.heldout_sites if self._use_heldout("site") else self.sites
        name = self.rng.choice(pool)
        return name.lower() if self.rng.random() < 0.06 else name

    def turbine(self) -> str:
        n = self.rng.randint(1, 48)
        form = self.rng.choices(range(9), weights=[30, 8, 6, 5, 3, 10, 6, 3, 4])[0]
        return [
            f"T-{n:02d}", f"T-{n}", f"WTG {n:02d}", f"WTG-{n:02d}", f"WTG{n:02d}",
            f"Turbine {n}", f"turbine {n}", f"Unit {n}", f"t-{n:02d}",
        ][form]  # fmt: skip

    def asset_segments(self) -> list[Segment]:
        """One turbine, sometimes with its site in front ("Northfield T-14": two ASSET spans)."""
        if self.rng.random() < 0.06:
            return [(self.site(), "ASSET"), (self.turbine(), "ASSET")]
        return [(self.turbine(), "ASSET")]

    def fault_code(self) -> str:
        return self.rng.choice(
            [f"F-{self.rng.randint(100, 999)}", f"code {self.rng.randint(1000, 9999)}",
             f"E-{self.rng.randint(10, 99)}", f"alarm {self.rng.randint(100, 3999)}"]
        )  # fmt: skip

    def date(self) -> str:
        day, month = self.rng.randint(1, 28), self.rng.randint(1, 12)
        if self.rng.random() < 0.3:
            return f"{day:02d}/{month:02d}/20{self.rng.randint(19, 25)}"
        return f"{day:02d}/{month:02d}"

    # -- readings -----------------------------------------------------------------------------
    def number_style(self) -> tuple[bool, bool, bool]:
        """How one writer formats numbers: thousands commas, ".5" for 0.5, decimal comma."""
        rng = self.rng
        return rng.random() < 0.55, rng.random() < 0.25, rng.random() < 0.12

    def number(self, value: float, decimals: int, style: tuple[bool, bool, bool]) -> str:
        """Format a number in a style: 1,450 / 1450 / 7.2 / 7,2 / .5."""
        thousands, bare_point, decimal_comma = style
        if decimals == 0:
            n = round(value)
            return f"{n:,}" if thousands and n >= 1000 else str(n)
        text = f"{value:.{decimals}f}"
        if bare_point and text.startswith("0."):
            return text[1:]
        return text.replace(".", ",") if decimal_comma else text

    def unit(self, unit: str) -> tuple[str, bool]:
        """The written unit and whether it is glued to the number."""
        if unit in UNIT_SPELLINGS and self.rng.random() < 0.08:
            return self.rng.choice(UNIT_SPELLINGS[unit]), False
        return unit, self.rng.random() < GLUE_RATE.get(unit, DEFAULT_GLUE_RATE)

    def reading(self, kind: str, single: bool = False) -> str:
        """A value of the given kind with its unit; unless ``single``, sometimes a range."""
        spec = READING_KINDS[kind]
        decimals = self.rng.choice(spec.decimals)
        unit, glued = self.unit(self.rng.choice(spec.units))
        low = self.rng.uniform(spec.low, spec.high)
        shape = 1.0 if single else self.rng.random()
        space = "" if glued else " "
        high = low + self.rng.uniform(0.05, 0.2) * (spec.high - spec.low)
        if shape < 0.07 and low >= 0:  # "80-85 °C": plain numbers, or the range would split
            style = (False, False, False)
            joiner = "-"
        else:  # "3.1 to 3.4 bar" or a single value, in one writer's style
            style = self.number_style()
            joiner = " to " if shape < 0.12 else ""
        text = self.number(low, decimals, style)
        if joiner:
            text += joiner + self.number(high, decimals, style)
        return f"{text}{space}{unit}"

    def quantity_reading(self, kinds: Sequence[str] | None = None) -> list[Segment]:
        kind = self.rng.choice(list(kinds or sorted(READING_KINDS)))
        name = self.rng.choice(READING_KINDS[kind].names)
        link = self.rng.choice(
            ["hit", "reached", "peaked at", "at", "reading", "was", "of", "=", ":", "", "up to",
             "approx", "~", ">", "down to", "around", "steady at"]
        )  # fmt: skip
        segments: list[Segment] = [(f"{name} {link}".strip(), None)]
        segments.append((self.reading(kind), "READING"))
        if kind == "vib" and self.rng.random() < 0.2:
            segments.append(("RMS", None))
        return segments

    def reading_quantity(self) -> list[Segment]:
        """A reading followed by what it measures: "7.2 mm/s vibration"."""
        kind = self.rng.choice(COMPONENT_KINDS)
        name = self.rng.choice(READING_KINDS[kind].names)
        return [(self.reading(kind), "READING"), (name, None)]

    def component_reading(self) -> list[Segment]:
        return [(self.component(), "COMPONENT"), *self.quantity_reading(COMPONENT_KINDS)]

    # -- sentences ----------------------------------------------------------------------------
    def expand(self, tree: tuple[object, ...]) -> list[Segment]:
        out: list[Segment] = []
        for item in tree:
            if isinstance(item, _Lit):
                out.append((item.text, None))
            elif isinstance(item, _Slot):
                if item.name.startswith(("RK_", "RS_")):  # any reading / a single value
                    single = item.name.startswith("RS_")
                    out.append((self.reading(item.name[3:], single), "READING"))
                else:
                    out.extend(self.fillers[item.name]())
            elif isinstance(item, _Alt):
                out.extend(self.expand(self.rng.choice(item.options)))
            elif isinstance(item, _Opt) and self.rng.random() < 0.5:
                out.extend(self.expand(item.body))
        return out

    def pick(self, table: _Table) -> list[Segment]:
        """Expand one template of a weighted table."""
        trees, weights = table
        return self.expand(self.rng.choices(trees, weights=weights)[0])

    def sentence(self) -> Sentence:
        """Draw one sentence of MIN_TOKENS..MAX_TOKENS tokens."""
        while True:
            tagged = self._draw()
            if MIN_TOKENS <= len(tagged) <= MAX_TOKENS:
                return tagged

    def _draw(self) -> Sentence:
        rng = self.rng
        segments: list[Segment] = []
        if rng.random() < 0.22:
            segments += self.pick(self.prefixes)
        n_clauses = rng.choices([1, 2, 3, 4], weights=[38, 35, 19, 8])[0]
        for i in range(n_clauses):
            if i:
                connector = rng.choices(CONNECTORS, weights=CONNECTOR_WEIGHTS)[0]
                segments.append((connector, None))
            segments += self.pick(self.clauses)
        if rng.random() < 0.2:
            segments += self.pick(self.tails)
        ending = rng.choices([".", "", "!"], weights=[74, 24, 2])[0]
        if ending:
            segments.append((ending, None))
        tokens = _label(segments)
        return self._recase(tokens)

    def _recase(self, tagged: Sentence) -> Sentence:
        rng = self.rng
        style = rng.random()
        keep = ("µ", "Ω")  # upper/lower would turn these unit letters into other letters
        if style < 0.04:
            return [(t if any(k in t for k in keep) else t.upper(), lab) for t, lab in tagged]
        if style < 0.08:
            return [(t if any(k in t for k in keep) else t.lower(), lab) for t, lab in tagged]
        out = [
            (self.typo(t) if rng.random() < 0.005 and lab == "O" else t, lab) for t, lab in tagged
        ]
        first, label = out[0]
        if first[:1].islower():
            out[0] = (first[0].upper() + first[1:], label)
        return out


def _label(segments: Sequence[Segment]) -> Sentence:
    """Tokenise each segment and give its tokens IOB2 labels."""
    tagged: Sentence = []
    for text, kind in segments:
        tokens = tokenise(text)
        for i, token in enumerate(tokens):
            tagged.append((token, "O" if kind is None else f"{'B' if i == 0 else 'I'}-{kind}"))
    return tagged


# ---------------------------------------------------------------------------------------------
# Corpus assembly, counting and writing.


def generate_corpus(seed: int = DEFAULT_SEED) -> dict[str, list[Sentence]]:
    """Draw train, dev and test; no token sequence appears twice anywhere in the corpus."""
    gen = Generator(random.Random(seed))
    seen: set[tuple[str, ...]] = set()
    corpus: dict[str, list[Sentence]] = {}
    for split, size in SPLIT_SIZES.items():
        gen.heldout = split != "train"
        sentences: list[Sentence] = []
        while len(sentences) < size:
            sentence = gen.sentence()
            key = tuple(t for t, _ in sentence)
            if key not in seen:
                seen.add(key)
                sentences.append(sentence)
        corpus[split] = sentences
    return corpus


def spans(sentence: Sentence) -> list[tuple[str, str]]:
    """(type, text) of every IOB2 span in a sentence."""
    found: list[tuple[str, str]] = []
    current: list[str] = []
    kind = ""
    for token, label in [*sentence, ("", "O")]:
        if current and not label.startswith("I-"):
            found.append((kind, " ".join(current)))
            current = []
        if label.startswith("B-"):
            kind, current = label[2:], [token]
        elif label.startswith("I-"):
            current.append(token)
    return found


def format_split(sentences: Sequence[Sentence]) -> str:
    """Column text: token TAB label per line, each sentence followed by a blank line."""
    return "".join("".join(f"{t}\t{lab}\n" for t, lab in s) + "\n" for s in sentences)


def summary(corpus: dict[str, list[Sentence]]) -> str:
    """Plain-text tables: spans per type per split, and how many dev/test spans train never has."""
    header = f"{'split':<6} {'sentences':>9} {'tokens':>7} " + " ".join(f"{t:>9}" for t in TYPES)
    lines = ["Spans per type", header]
    for split, sentences in corpus.items():
        counts = dict.fromkeys(TYPES, 0)
        for s in sentences:
            for kind, _ in spans(s):
                counts[kind] += 1
        n_tokens = sum(len(s) for s in sentences)
        cells = " ".join(f"{counts[t]:>9}" for t in TYPES)
        lines.append(f"{split:<6} {len(sentences):>9} {n_tokens:>7} {cells}")
    lines += ["", "Spans whose (type, text) never occurs in train: unseen/all (share)"]
    lines.append(f"{'split':<6} " + " ".join(f"{t:>16}" for t in (*TYPES, "COMPONENT+DEFECT")))
    train_spans = {span for s in corpus["train"] for span in spans(s)}
    groups = [(t,) for t in TYPES] + [("COMPONENT", "DEFECT")]
    for split in ("dev", "test"):
        all_spans = [span for s in corpus[split] for span in spans(s)]
        cells = []
        for group in groups:
            of_group = [sp for sp in all_spans if sp[0] in group]
            unseen = sum(sp not in train_spans for sp in of_group)
            cells.append(f"{unseen}/{len(of_group)} ({100 * unseen / len(of_group):.0f}%)")
        lines.append(f"{split:<6} " + " ".join(f"{c:>16}" for c in cells))
    return "\n".join(lines)


def demo_lexicon(seed: int = DEFAULT_SEED) -> tuple[list[tuple[str, str]], set[str]]:
    """The catalogue's (name, type) entries, sorted, and the names of those withheld from train.

    A fresh Generator built from the same seed holds the same name pools `generate_corpus` draws
    from; the corpus files do not change. Which names are left out comes from its own stream.
    """
    gen = Generator(random.Random(seed))
    held: set[str] = set()
    entries: set[tuple[str, str]] = set()
    pools: list[tuple[list[str], str, bool]] = [
        ([f"{m} {h}" for m, h in gen.components], "COMPONENT", False),
        ([f"{m} {h}" for m, h in gen.heldout_components], "COMPONENT", True),
        (gen.single_components.names, "COMPONENT", False),
        (gen.heldout_single_components.names, "COMPONENT", True),
        ([f"{m} {h}" for m, h, _ in gen.defects], "DEFECT", False),
        ([f"{m} {h}" for m, h, _ in gen.heldout_defects], "DEFECT", True),
        (gen.single_defects.names, "DEFECT", False),
        (gen.heldout_single_defects.names, "DEFECT", True),
    ]
    for names, kind, withheld in pools:
        for name in names:
            entries.add((name, kind))
            if withheld:
                held.add(name)
    rng = random.Random(seed + 1)
    kept = [e for e in sorted(entries, key=lambda e: (e[1], e[0])) if rng.random() >= LEXICON_DROP]
    return kept, held


def format_lexicon(entries: Sequence[tuple[str, str]]) -> str:
    return LEXICON_HEADER + "".join(f"{name}\t{kind}\n" for name, kind in entries)


# ---------------------------------------------------------------------------------------------
# The unannotated archive: more reports from the same crews, with no labels.

_NO_SPACE_BEFORE = frozenset(",.;:!?)")
_NO_SPACE_AFTER = frozenset("(")


def detokenise(tokens: Sequence[str]) -> str:
    """Write tokens as a crew would type them: punctuation against the word before it, "(" against
    the word after; `tokenise` gives the tokens back."""
    parts: list[str] = []
    for i, token in enumerate(tokens):
        if i and token not in _NO_SPACE_BEFORE and tokens[i - 1] not in _NO_SPACE_AFTER:
            parts.append(" ")
        parts.append(token)
    return "".join(parts)


def generate_unannotated(
    seed: int = DEFAULT_SEED,
    exclude: set[tuple[str, ...]] | frozenset[tuple[str, ...]] = frozenset(),
    sentences: int = UNANNOTATED_SENTENCES,
) -> list[list[str]]:
    """Reports (each a list of sentence texts) as an operator's archive holds them.

    The name pools are those of `generate_corpus` (a Generator built from the same seed); the
    sentences come from a stream of their own, so the annotated splits do not change. Withheld
    names are drawn at their share of each pool (`Generator.archive`), and no sentence whose
    tokens are in ``exclude`` (the annotated splits) is written.
    """
    gen = Generator(random.Random(seed), draws=random.Random(f"unannotated {seed}"))
    gen.archive()
    reports: list[list[str]] = []
    written = 0
    while written < sentences:
        size = min(gen.rng.choices(REPORT_SIZES, weights=REPORT_WEIGHTS)[0], sentences - written)
        report: list[str] = []
        while len(report) < size:
            tokens = [token for token, _ in gen.sentence()]
            if tuple(tokens) in exclude:
                continue
            text = detokenise(tokens)
            if tokenise(text) != tokens:  # never seen; a guard against a new token rule
                raise ValueError(f"detokenised text does not give its tokens back: {text!r}")
            report.append(text)
        reports.append(report)
        written += size
    return reports


def format_unannotated(reports: Sequence[Sequence[str]]) -> str:
    """A report is a paragraph: its sentences one per line, then a blank line."""
    return "".join("".join(f"{line}\n" for line in report) + "\n" for report in reports)


def write_unannotated(reports: Sequence[Sequence[str]], path: Path) -> None:
    """Gzip with no file name and mtime 0 in the header, so the same reports give the same bytes."""
    data = format_unannotated(reports).encode("utf-8")
    with (
        open(path, "wb") as raw,
        gzip.GzipFile(filename="", mode="wb", fileobj=raw, compresslevel=9, mtime=0) as gz,
    ):
        gz.write(data)


def archive_summary(reports: Sequence[Sequence[str]], held: set[str]) -> str:
    """Sizes, and how often the names withheld from train occur (case ignored, whole tokens)."""
    wanted = {tuple(tokenise(name.lower())): name for name in held}
    longest = max(len(key) for key in wanted)
    counts = dict.fromkeys(held, 0)
    n_sentences = n_tokens = 0
    for report in reports:
        for line in report:
            tokens = tokenise(line.lower())
            n_sentences += 1
            n_tokens += len(tokens)
            for i in range(len(tokens)):
                for n in range(1, min(longest, len(tokens) - i) + 1):
                    name = wanted.get(tuple(tokens[i : i + n]))
                    if name is not None:
                        counts[name] += 1
    ranked = sorted((n, name) for name, n in counts.items())
    rarest = ", ".join(f"{name} {n}" for n, name in ranked[:3])
    return (
        f"{UNANNOTATED_FILE}: {len(reports)} reports, {n_sentences} sentences, {n_tokens} tokens; "
        f"{sum(n > 0 for n, _ in ranked)} of the {len(held)} names withheld from train occur in "
        f"it (median {ranked[len(ranked) // 2][0]} times; rarest: {rarest})"
    )


def write_corpus(corpus: dict[str, list[Sentence]], out: Path) -> None:
    out.mkdir(parents=True, exist_ok=True)
    for split, sentences in corpus.items():
        with open(out / f"{split}.txt", "w", encoding="utf-8", newline="\n") as f:
            f.write(format_split(sentences))


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="output directory")
    args = parser.parse_args(argv)
    corpus = generate_corpus(args.seed)
    write_corpus(corpus, args.out)
    entries, held = demo_lexicon(args.seed)
    with open(args.out / "lexicon.tsv", "w", encoding="utf-8", newline="\n") as f:
        f.write(format_lexicon(entries))
    annotated = {tuple(t for t, _ in s) for sentences in corpus.values() for s in sentences}
    reports = generate_unannotated(args.seed, annotated)
    write_unannotated(reports, args.out / UNANNOTATED_FILE)
    print(summary(corpus))
    kinds = {kind: sum(k == kind for _, k in entries) for kind in ("COMPONENT", "DEFECT")}
    print(
        f"\nlexicon.tsv: {len(entries)} names ({kinds['COMPONENT']} COMPONENT, "
        f"{kinds['DEFECT']} DEFECT), {sum(name in held for name, _ in entries)} of them "
        "withheld from train"
    )
    print(archive_summary(reports, held))
    return 0


if __name__ == "__main__":
    sys.exit(main())
