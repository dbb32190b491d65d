"""Rule deck: a TOML file naming exposure set-ups and the layers they print.

The deck is validated with pydantic models that forbid unknown keys and use
strict types, so a typo or a wrong type is reported with the file and the
dotted key path (``layers[1].source``) instead of being silently ignored.

All lengths in a deck are in nanometres at wafer scale.  A layout drawn at
mask scale declares ``drawn_scale = "mask"`` and its ``reduction``; pitches
are then divided by the reduction before any optics is applied.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Annotated, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from pitchguard.deck_bounds import (
    MAX_ANGLE_DEG,
    MAX_DENSE_LINES,
    MAX_LENGTH_NM,
    MAX_NESTING,
    MIN_NA,
    MIN_SOURCE_WIDTH,
    bounded,
    layer_problems,
    length,
    source_width_problem,
)
from pitchguard.deck_messages import (
    KeyedError,
    deck_error,
    resist_index_message,
    validation_messages,
)
from pitchguard.errors import DeckError, nesting_depth, read_input_text
from pitchguard.layer_rule import (  # noqa: F401  (re-exported: the deck's public names)
    BIAS_LAMBDA_NA,
    COMPACT_LAMBDA_NA,
    INTERACTION_RANGE_LAMBDA_NA,
    LIMIT_DEFAULTS,
    MIN_RUN_LAMBDA_NA,
    PULLBACK_LAMBDA_NA,
    LayerRule,
    parse_layer_spec,
    quarter_wave_focus_nm,
)

SEVERITIES = ("fail", "risk", "marginal")
"""Finding severities, worst first."""


def _layer_spec_text(v: str) -> str:
    parse_layer_spec(v)
    return v


LayerSpec = Annotated[str, AfterValidator(_layer_spec_text)]
"""A ``"LAYER/DATATYPE"`` string, checked when the deck is read."""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, frozen=True, allow_inf_nan=False)


_PUPIL = "sigma is a fraction of the pupil's radius"
Sigma = Annotated[float, bounded(0.0, 1.0, why=_PUPIL, hi_open=True)]
SigmaOuter = Annotated[float, bounded(MIN_SOURCE_WIDTH, 1.0, why=_PUPIL)]

# Photoresists and top coats at DUV wavelengths lie near 1.5-1.8 (common practice).
ResistIndex = Annotated[
    float, bounded(1.0, 2.5, why="resists and top coats lie near 1.5-1.8 (common practice)")
]


class Coherent(_Model):
    """A single on-axis source point (sigma = 0)."""

    shape: Literal["coherent"]


class Conventional(_Model):
    """A uniform disc of radius ``sigma`` (in units of NA)."""

    shape: Literal["conventional"]
    sigma: Annotated[
        float,
        bounded(
            MIN_SOURCE_WIDTH,
            1.0,
            why=f"{_PUPIL}, and the source sampling resolves discs of radius "
            f'{MIN_SOURCE_WIDTH:g} and more (use shape = "coherent" for a point source)',
        ),
    ]


class _Ring(_Model):
    sigma_inner: Sigma
    sigma_outer: SigmaOuter

    @model_validator(mode="after")
    def _inner_below_outer(self):
        if self.sigma_inner >= self.sigma_outer:
            raise KeyedError(
                "sigma_inner",
                f"{self.sigma_inner} must be below sigma_outer ({self.sigma_outer})",
            )
        width = source_width_problem(
            "the ring (sigma_outer - sigma_inner)", self.sigma_outer - self.sigma_inner
        )
        if width:
            raise KeyedError("sigma_inner", width)
        return self

    def _pole_width(self):
        # The pole's arc at the outer rim, the width optics.orders.cell_step samples.
        import math

        arc = self.sigma_outer * math.radians(self.opening_deg)
        problem = source_width_problem("each pole's arc (sigma_outer x opening)", arc)
        if problem:
            raise KeyedError("opening_deg", problem)
        return self


_OPENING = "a pole is a sector of the ring"


class Annular(_Ring):
    """A uniform ring between ``sigma_inner`` and ``sigma_outer``."""

    shape: Literal["annular"]


class Dipole(_Ring):
    """Two ring sectors of ``opening_deg`` centred on the x or y axis.

    A dipole on x (poles left and right of the pupil centre) images lines
    that run along y (pitch along x), and does little for lines along x.
    """

    shape: Literal["dipole"]
    opening_deg: Annotated[float, bounded(0.0, 180.0, why=_OPENING, lo_open=True)]
    axis: Literal["x", "y"]

    @model_validator(mode="after")
    def _poles_sampled(self):
        return self._pole_width()


class Quadrupole(_Ring):
    """Four ring sectors of ``opening_deg``.

    ``rotation_deg`` places the first pole: 45 (the default) puts the poles on
    the diagonals, which serves lines along x and along y alike; 0 puts them
    on the axes.
    """

    shape: Literal["quadrupole"]
    opening_deg: Annotated[
        float, bounded(0.0, 90.0, why=f"{_OPENING}, four to a turn", lo_open=True)
    ]
    rotation_deg: Annotated[
        float,
        bounded(
            -MAX_ANGLE_DEG,
            MAX_ANGLE_DEG,
            why="an angle of at most a turn either way (a larger one keeps no precision)",
        ),
    ] = 45.0

    @model_validator(mode="after")
    def _poles_sampled(self):
        return self._pole_width()


Illumination = Annotated[
    Coherent | Conventional | Annular | Dipole | Quadrupole, Field(discriminator="shape")
]


def sigma_max(illumination: Illumination) -> float:
    """Largest source radius in units of NA."""
    if isinstance(illumination, Coherent):
        return 0.0
    if isinstance(illumination, Conventional):
        return illumination.sigma
    return illumination.sigma_outer


class BinaryMask(_Model):
    """Chrome on glass: opaque amplitude 0, clear amplitude 1."""

    kind: Literal["binary"]


class AttenuatedMask(_Model):
    """Attenuated phase shift: dark areas pass ``transmission`` (intensity) at 180 degrees."""

    kind: Literal["attenuated"]
    transmission: Annotated[
        float,
        bounded(
            0.0,
            1.0,
            why="a fraction of the clear area's intensity (1 would make dark areas clear)",
            lo_open=True,
            hi_open=True,
        ),
    ]


Mask = Annotated[BinaryMask | AttenuatedMask, Field(discriminator="kind")]


class Exposure(_Model):
    """One scanner set-up: wavelength, numerical aperture, source and mask."""

    wavelength_nm: Annotated[
        float,
        bounded(
            1.0,
            1000.0,
            why="lithography uses light from soft X-rays to the near UV",
            lo_open=True,
        ),
    ]
    na: Annotated[
        float,
        bounded(
            MIN_NA,
            2.0,
            why="projection lenses for lithography start near NA 0.1, and every window "
            "imaged is sized in lambda/NA",
        ),
    ]
    immersion_index: Annotated[
        float, bounded(1.0, 2.0, why="air is 1, water 1.44 at 193 nm; no fluid in use reaches 2")
    ] = 1.0
    illumination: Illumination
    mask: Mask = BinaryMask(kind="binary")
    # The light's polarisation (optics.polarization): it decides the image above NA ~0.7.
    polarization: Literal["unpolarized", "x", "y", "tangential", "radial", "scalar"] = "unpolarized"
    # Index of the medium the image forms in (the resist); None: the immersion medium.
    resist_index: ResistIndex | None = None

    @model_validator(mode="after")
    def _na_below_index(self):
        if self.na >= self.immersion_index:
            raise KeyedError(
                "na",
                f"{self.na} must be below immersion_index ({self.immersion_index}); "
                "set immersion_index for an immersion scanner",
            )
        if self.resist_index is not None and self.na >= self.resist_index:
            raise KeyedError("resist_index", resist_index_message(self.resist_index, self.na))
        return self

    @property
    def image_index(self) -> float:
        """Index of the medium the image forms in: the resist's, else the immersion's."""
        return self.resist_index or self.immersion_index

    @property
    def lambda_over_na_nm(self) -> float:
        return self.wavelength_nm / self.na

    @property
    def sigma_max(self) -> float:
        return sigma_max(self.illumination)

    @property
    def cutoff_pitch_nm(self) -> float:
        """Smallest pitch any source point can image: lambda / (NA (1 + sigma_max))."""
        return self.wavelength_nm / (self.na * (1.0 + self.sigma_max))


class Anchor(_Model):
    """The feature printed on size at the nominal dose: a grating of this pitch and CD."""

    pitch_nm: Annotated[float, length()]
    cd_nm: Annotated[float, length()]

    @model_validator(mode="after")
    def _cd_inside_pitch(self):
        if self.cd_nm >= self.pitch_nm:
            raise KeyedError("cd_nm", f"{self.cd_nm} must be below pitch_nm ({self.pitch_nm})")
        return self


_NM = "a length in nm at wafer scale, at most a centimetre (beyond any exposure field)"
Length = Annotated[float, length()]
K1 = Annotated[
    float,
    bounded(
        0.0,
        2.0,
        why="k1 = pitch NA / (2 lambda): no pitch images below 0.25, and 2 is a pitch of "
        "4 lambda/NA",
        lo_open=True,
        hi_open=True,
    ),
]
Nils = Annotated[
    float,
    bounded(
        0.0, 20.0, why="NILS of printable edges lies below 20 (2 is comfortable)", hi_open=True
    ),
]
_DOSE_PCT = "a percentage of the dose"
CdPct = Annotated[
    float, bounded(0.0, 100.0, why="a percentage of the CD", lo_open=True, hi_open=True)
]


class Limits(_Model):
    """Per-layer limits.  Every key may be set in ``[layer_defaults]`` or on a layer.

    Defaults (common practice, see "Checks" in README.md):

    * ``k1_risk_below = 0.30``: below this the pitch needs strong off-axis
      illumination and resolution enhancement.
    * ``k1_marginal_below = 0.40``: between the two bands the pitch is demanding.
    * ``min_run_nm``: edges shorter than this are 2-D (line ends, jogs) and are
      counted, not judged.  Default 0.5 lambda/NA of the layer's exposure.
    * ``interaction_range_nm``: the optical interaction range, how far from an
      edge neighbours are looked for.  Beyond it an edge counts as isolated.
      Default 3 lambda/NA.
    * ``compact_max_nm``: features whose extents are both below this (contacts,
      vias, posts, short lines) are judged as 2-D patterns: arrays of them by
      their lattice's orders and 2-D image, not by 1-D cuts.  Default
      1 lambda/NA: smaller features image as 2-D blobs.
    * ``line_end_pullback_max_nm``: the most a printed line end may fall short of
      the drawn one (2-D clip, best focus, nominal dose).  Default 0.25
      lambda/NA: an order of magnitude of what end extensions in OPC make up;
      set it from your process.
    * ``pitch_tolerance_nm = 1.0``: sites whose pitch differs by less than this
      belong to one pitch class (one region).
    * ``dense_min_lines = 5``: a region of at least this many lines is a dense
      array; 2 up to this is semi-isolated; 1 is isolated.

    Aerial-image limits (judged on the image of each site's real cut):

    * ``image_checks = true``: image every site (false: orders and k1 only).
    * ``nils_fail_below = 1.0``, ``nils_risk_below = 1.5``,
      ``nils_marginal_below = 2.0``: NILS at the printed edges (common practice:
      below ~1 the edge is not controllable, ~1.5 is a usual floor, >= 2 is
      comfortable).
    * ``el_min_pct = 5.0``: smallest exposure latitude (common practice).
    * ``cd_tolerance_pct = 10.0``: CD window for EL and DOF, and the largest
      CD error at the anchored dose (common practice).
    * ``dof_min_nm``: smallest depth of focus at ``el_min_pct``.  Default
      the quarter-wave focus lambda / (4 (n - sqrt(n^2 - NA^2))), which is
      0.5 n lambda / NA^2 at low NA (an order of magnitude, set it from your
      process).  It must not exceed the focus span sampled, which is all
      that can be measured.
    * ``focus_half_range_nm``: focus is sampled over +- this.  Default the
      same quarter-wave focus.  ``focus_steps = 9`` samples (odd: includes 0).
    * ``resist_blur_nm``: standard deviation (wafer nm) of a Gaussian blur of
      the aerial image before the threshold (acid diffusion in a chemically
      amplified resist).  Default 0: none.
    * ``edge_placement_max_pct``: how far a printed edge may sit from the drawn
      one, in % of the drawn CD, at best focus and nominal dose.  Default half
      of ``cd_tolerance_pct``: the CD budget split between the two edges
      (common practice), so both edges out by this much print the CD at its
      tolerance.
    * ``sizing = "drawn"``; ``"retarget"`` judges each cut's mask biased to print on
      size at the anchored dose (optics.sizing), ``bias_max_nm`` (default 0.1
      lambda/NA, an order of magnitude) the largest bias per edge.
    * ``resist_index``: index of the medium the image forms in (the resist),
      which sets the field components of vector light.  Default the
      exposure's ``resist_index``, else its immersion index.
    * ``anchor = { pitch_nm, cd_nm }``: the feature printed on size at the
      nominal dose (dose-to-size).  Without it every site is sized at its own
      dose and the through-pitch CD error is not judged.
    """

    k1_risk_below: K1 | None = None
    k1_marginal_below: K1 | None = None
    min_run_nm: Length | None = None
    interaction_range_nm: Length | None = None
    compact_max_nm: Length | None = None
    line_end_pullback_max_nm: Annotated[float, bounded(0.0, MAX_LENGTH_NM, why=_NM)] | None = None
    pitch_tolerance_nm: Length | None = None
    dense_min_lines: (
        Annotated[
            int,
            bounded(
                2,
                MAX_DENSE_LINES,
                why="the lines that make a region a dense array; more would leave none dense",
            ),
        ]
        | None
    ) = None
    image_checks: bool | None = None
    nils_fail_below: Nils | None = None
    nils_risk_below: Nils | None = None
    nils_marginal_below: Nils | None = None
    el_min_pct: Annotated[float, bounded(0.0, 100.0, why=_DOSE_PCT, hi_open=True)] | None = None
    cd_tolerance_pct: CdPct | None = None
    dof_min_nm: Annotated[float, bounded(0.0, MAX_LENGTH_NM, why=_NM)] | None = None
    focus_half_range_nm: Annotated[float, bounded(0.0, MAX_LENGTH_NM, why=_NM)] | None = None
    focus_steps: (
        Annotated[int, bounded(1, 41, why="focus samples, each a full set of images")] | None
    ) = None
    resist_blur_nm: (
        Annotated[
            float,
            bounded(0.0, 100.0, why="a blur that wide would wash out every pitch this tool judges"),
        ]
        | None
    ) = None
    resist_index: ResistIndex | None = None
    edge_placement_max_pct: CdPct | None = None
    sizing: Literal["drawn", "retarget"] | None = None
    bias_max_nm: (
        Annotated[
            float,
            bounded(0.0, 1000.0, why="a mask bias per edge, in nm at wafer scale", lo_open=True),
        ]
        | None
    ) = None
    anchor: Anchor | None = None

    @field_validator("focus_steps")
    @classmethod
    def _odd(cls, v: int | None) -> int | None:
        if v is not None and v % 2 == 0:
            raise ValueError(f"{v} must be odd (the samples include best focus)")
        return v


class LayerEntry(Limits):
    """One ``[[layers]]`` entry of a deck."""

    name: Annotated[str, Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.+-]+$")]
    source: LayerSpec
    exposure: str
    field: Literal["clear", "dark"]
    # A layer the scanned cell may lack (without it, a layer with no shapes is
    # an error: a layer map that does not match the layout would pass forever).
    optional: bool = False


class Markers(_Model):
    """Marker layout layer/datatype per severity."""

    fail: LayerSpec = "700/1"
    risk: LayerSpec = "700/2"
    marginal: LayerSpec = "700/3"


class DeckInfo(_Model):
    name: str = ""
    description: str = ""
    drawn_scale: Literal["wafer", "mask"] = "wafer"
    reduction: Annotated[
        float, bounded(1.0, 10.0, why="projection optics reduce 1x to 5x (common practice)")
    ] = 4.0


class DeckFile(_Model):
    """The whole deck as written in TOML."""

    deck: DeckInfo = DeckInfo()
    exposures: dict[str, Exposure] = Field(min_length=1)
    layer_defaults: Limits = Limits()
    layers: list[LayerEntry] = Field(min_length=1)
    markers: Markers = Markers()

    @model_validator(mode="after")
    def _cross_checks(self):
        seen_names: set[str] = set()
        seen_sources: dict[tuple[int, int], str] = {}
        for i, layer in enumerate(self.layers):
            if layer.exposure not in self.exposures:
                known = ", ".join(sorted(self.exposures)) or "none"
                raise KeyedError(
                    f"layers[{i}].exposure",
                    f"unknown exposure {layer.exposure!r} (defined: {known})",
                )
            if layer.name in seen_names:
                raise KeyedError(f"layers[{i}].name", f"duplicate layer name {layer.name!r}")
            seen_names.add(layer.name)
            spec = parse_layer_spec(layer.source)
            if spec in seen_sources:
                raise KeyedError(
                    f"layers[{i}].source",
                    f"{layer.source!r} is already used by layer {seen_sources[spec]!r}",
                )
            seen_sources[spec] = layer.name
        marks = {s: parse_layer_spec(getattr(self.markers, s)) for s in SEVERITIES}
        if len(set(marks.values())) != len(marks):
            raise KeyedError("markers", "each severity needs its own layer/datatype")
        return self


class Deck:
    """A validated deck: layers with resolved limits, markers, scale."""

    def __init__(self, raw: DeckFile, path: Path | None = None, text: str = ""):
        self.raw = raw
        self.path = path
        self.text = text  # the TOML as read (shipped to tile workers)
        self.name = raw.deck.name or (path.stem if path else "deck")
        self.drawn_scale = raw.deck.drawn_scale
        self.reduction = raw.deck.reduction
        self.exposures = dict(raw.exposures)
        self.layers = [
            LayerRule(e, raw.exposures[e.exposure], raw.layer_defaults) for e in raw.layers
        ]
        problems = [
            problem
            for i, (rule, entry) in enumerate(zip(self.layers, raw.layers, strict=True))
            for problem in layer_problems(i, rule, entry, raw.layer_defaults)
        ]
        if problems:
            # A problem of [layer_defaults] is found once per layer: said once.
            raise deck_error(self._where(), list(dict.fromkeys(problems)))
        self.markers = {s: parse_layer_spec(getattr(raw.markers, s)) for s in SEVERITIES}

    def _where(self) -> str:
        return str(self.path) if self.path else "<deck>"

    @property
    def scale_to_wafer(self) -> float:
        """Factor from drawn layout length to wafer length."""
        return 1.0 / self.reduction if self.drawn_scale == "mask" else 1.0

    def layer(self, name: str) -> LayerRule:
        for rule in self.layers:
            if rule.name == name:
                return rule
        known = ", ".join(r.name for r in self.layers)
        raise DeckError(f"{self._where()}: no layer named {name!r} (deck has: {known})")


def parse_deck(text: str, path: Path | None = None) -> Deck:
    """Parse and validate deck text.  Raises DeckError with a one-line message."""
    where = str(path) if path else "<deck>"
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DeckError(f"{where}: not valid TOML: {exc}") from None
    except RecursionError:  # the parser recurses once per level of nesting
        raise DeckError(
            f"{where}: not a deck: arrays or tables nest deeper than the TOML parser "
            f"follows (a deck nests at most {MAX_NESTING} levels)"
        ) from None
    if nesting_depth(data, MAX_NESTING) > MAX_NESTING:
        raise DeckError(
            f"{where}: not a deck: arrays or tables nest deeper than {MAX_NESTING} levels "
            "(a deck needs four)"
        )
    try:
        raw = DeckFile.model_validate(data)
    except ValidationError as exc:
        raise deck_error(where, validation_messages(exc, data)) from None
    return Deck(raw, path, text)


def load_deck(path: str | Path) -> Deck:
    """Read and validate a deck file.  Raises DeckError with a one-line message."""
    p = Path(path)
    return parse_deck(read_input_text(p, "deck", DeckError), p)
