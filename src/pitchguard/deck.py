"""Rule deck: a TOML file naming exposure set-ups and the layers they print.

The deck is validated with pydantic models that forbid unknown keys and use
strict types, so a typo or a wrong type is reported with the file and the
dotted key path (``layers[1].source``) instead of being silently ignored.

All lengths in a deck are in nanometres at wafer scale.  A layout drawn at
mask scale declares ``drawn_scale = "mask"`` and its ``reduction``; pitches
are then divided by the reduction before any optics is applied.
"""

from __future__ import annotations

import math
import re
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

from pitchguard.deck_messages import KeyedError, resist_index_message, validation_message
from pitchguard.errors import DeckError, read_input_text

SEVERITIES = ("fail", "risk", "marginal")
"""Finding severities, worst first."""

_LAYER_SPEC = re.compile(r"^\s*(\d+)\s*/\s*(\d+)\s*$")
_MAX_GDS_LAYER = 65535


def parse_layer_spec(text: str) -> tuple[int, int]:
    """Parse ``"L/D"`` into ``(layer, datatype)``; raise ValueError otherwise."""
    m = _LAYER_SPEC.match(text)
    if not m:
        raise ValueError(f'expected "LAYER/DATATYPE" such as "7/0", got {text!r}')
    layer, datatype = int(m.group(1)), int(m.group(2))
    if layer > _MAX_GDS_LAYER or datatype > _MAX_GDS_LAYER:
        raise ValueError(f"layer and datatype must be 0..{_MAX_GDS_LAYER}, got {text!r}")
    return layer, datatype


def _layer_spec_text(v: str) -> str:
    parse_layer_spec(v)
    return v


LayerSpec = Annotated[str, AfterValidator(_layer_spec_text)]
"""A ``"LAYER/DATATYPE"`` string, checked when the deck is read."""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, frozen=True, allow_inf_nan=False)


Sigma = Annotated[float, Field(ge=0.0, le=1.0)]

# Photoresists and top coats at DUV wavelengths lie near 1.5-1.8 (common practice).
ResistIndex = Annotated[float, Field(ge=1.0, le=2.5)]


class Coherent(_Model):
    """A single on-axis source point (sigma = 0)."""

    shape: Literal["coherent"]


class Conventional(_Model):
    """A uniform disc of radius ``sigma`` (in units of NA)."""

    shape: Literal["conventional"]
    sigma: Annotated[float, Field(gt=0.0, le=1.0)]


class _Ring(_Model):
    sigma_inner: Sigma
    sigma_outer: Annotated[float, Field(gt=0.0, le=1.0)]

    @model_validator(mode="after")
    def _inner_below_outer(self):
        if self.sigma_inner >= self.sigma_outer:
            raise KeyedError(
                "sigma_inner",
                f"{self.sigma_inner} must be below sigma_outer ({self.sigma_outer})",
            )
        return self


class Annular(_Ring):
    """A uniform ring between ``sigma_inner`` and ``sigma_outer``."""

    shape: Literal["annular"]


class Dipole(_Ring):
    """Two ring sectors of ``opening_deg`` centred on the x or y axis.

    A dipole on x (poles left and right of the pupil centre) images lines
    that run along y (pitch along x), and does little for lines along x.
    """

    shape: Literal["dipole"]
    opening_deg: Annotated[float, Field(gt=0.0, le=180.0)]
    axis: Literal["x", "y"]


class Quadrupole(_Ring):
    """Four ring sectors of ``opening_deg``.

    ``rotation_deg`` places the first pole: 45 (the default) puts the poles on
    the diagonals, which serves lines along x and along y alike; 0 puts them
    on the axes.
    """

    shape: Literal["quadrupole"]
    opening_deg: Annotated[float, Field(gt=0.0, le=90.0)]
    rotation_deg: float = 45.0


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
    transmission: Annotated[float, Field(gt=0.0, lt=1.0)]


Mask = Annotated[BinaryMask | AttenuatedMask, Field(discriminator="kind")]


class Exposure(_Model):
    """One scanner set-up: wavelength, numerical aperture, source and mask."""

    wavelength_nm: Annotated[float, Field(gt=1.0, le=1000.0)]
    na: Annotated[float, Field(gt=0.0, le=2.0)]
    immersion_index: Annotated[float, Field(ge=1.0, le=2.0)] = 1.0
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

    pitch_nm: Annotated[float, Field(gt=0.0)]
    cd_nm: Annotated[float, Field(gt=0.0)]

    @model_validator(mode="after")
    def _cd_inside_pitch(self):
        if self.cd_nm >= self.pitch_nm:
            raise KeyedError("cd_nm", f"{self.cd_nm} must be below pitch_nm ({self.pitch_nm})")
        return self


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

    k1_risk_below: Annotated[float, Field(gt=0.0, lt=2.0)] | None = None
    k1_marginal_below: Annotated[float, Field(gt=0.0, lt=2.0)] | None = None
    min_run_nm: Annotated[float, Field(gt=0.0)] | None = None
    interaction_range_nm: Annotated[float, Field(gt=0.0)] | None = None
    compact_max_nm: Annotated[float, Field(gt=0.0)] | None = None
    line_end_pullback_max_nm: Annotated[float, Field(ge=0.0)] | None = None
    pitch_tolerance_nm: Annotated[float, Field(gt=0.0)] | None = None
    dense_min_lines: Annotated[int, Field(ge=2)] | None = None
    image_checks: bool | None = None
    nils_fail_below: Annotated[float, Field(ge=0.0, lt=20.0)] | None = None
    nils_risk_below: Annotated[float, Field(ge=0.0, lt=20.0)] | None = None
    nils_marginal_below: Annotated[float, Field(ge=0.0, lt=20.0)] | None = None
    el_min_pct: Annotated[float, Field(ge=0.0, lt=100.0)] | None = None
    cd_tolerance_pct: Annotated[float, Field(gt=0.0, lt=100.0)] | None = None
    dof_min_nm: Annotated[float, Field(ge=0.0)] | None = None
    focus_half_range_nm: Annotated[float, Field(ge=0.0)] | None = None
    focus_steps: Annotated[int, Field(ge=1, le=41)] | None = None
    # Resist blur beyond 100 nm would wash out every pitch this tool judges.
    resist_blur_nm: Annotated[float, Field(ge=0.0, le=100.0)] | None = None
    resist_index: ResistIndex | None = None
    edge_placement_max_pct: Annotated[float, Field(gt=0.0, lt=100.0)] | None = None
    sizing: Literal["drawn", "retarget"] | None = None
    bias_max_nm: Annotated[float, Field(gt=0.0, le=1000.0)] | None = None
    anchor: Anchor | None = None

    @field_validator("focus_steps")
    @classmethod
    def _odd(cls, v: int | None) -> int | None:
        if v is not None and v % 2 == 0:
            raise ValueError(f"{v} must be odd (the samples include best focus)")
        return v


LIMIT_DEFAULTS = {
    "k1_risk_below": 0.30,
    "k1_marginal_below": 0.40,
    "pitch_tolerance_nm": 1.0,
    "dense_min_lines": 5,
    "image_checks": True,
    "nils_fail_below": 1.0,
    "nils_risk_below": 1.5,
    "nils_marginal_below": 2.0,
    "el_min_pct": 5.0,
    "cd_tolerance_pct": 10.0,
    "focus_steps": 9,
}
"""Limit defaults that do not depend on the exposure (single source of truth)."""

MIN_RUN_LAMBDA_NA = 0.5
INTERACTION_RANGE_LAMBDA_NA = 3.0
COMPACT_LAMBDA_NA = 1.0
PULLBACK_LAMBDA_NA = 0.25
BIAS_LAMBDA_NA = 0.1


def quarter_wave_focus_nm(exposure) -> float:
    """The defocus whose path difference at the pupil's edge, n z (1 - cos theta)
    with sin theta = NA / n, is a quarter wave: lambda / (4 (n - sqrt(n^2 - NA^2))).
    The default DOF floor and focus half range; 0.5 n lambda / NA^2 at low NA."""
    n, na = exposure.immersion_index, exposure.na
    # n - sqrt(n^2 - NA^2) written without cancellation at small NA.
    return exposure.wavelength_nm * (n + math.sqrt(n * n - na * na)) / (4.0 * na * na)


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
    reduction: Annotated[float, Field(ge=1.0, le=10.0)] = 4.0


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


# --------------------------------------------------------------------------- resolved deck


class LayerRule:
    """A deck layer with its exposure and every limit resolved to a number."""

    __slots__ = (
        "name",
        "layer",
        "datatype",
        "exposure_name",
        "exposure",
        "field",
        "k1_risk_below",
        "k1_marginal_below",
        "min_run_nm",
        "interaction_range_nm",
        "compact_max_nm",
        "line_end_pullback_max_nm",
        "pitch_tolerance_nm",
        "dense_min_lines",
        "image_checks",
        "nils_risk_below",
        "nils_marginal_below",
        "el_min_pct",
        "cd_tolerance_pct",
        "dof_min_nm",
        "focus_half_range_nm",
        "focus_steps",
        "resist_blur_nm",
        "edge_placement_max_pct",
        "sizing",
        "bias_max_nm",
        "anchor",
        "nils_fail_below",
        "optional",
    )

    def __init__(self, entry: LayerEntry, exposure: Exposure, defaults: Limits):
        self.name = entry.name
        self.layer, self.datatype = parse_layer_spec(entry.source)
        self.exposure_name = entry.exposure
        own_index = entry.resist_index if entry.resist_index is not None else defaults.resist_index
        if own_index is not None and own_index != exposure.resist_index:
            # Every image cache keys on the exposure: the layer's medium is part of it.
            exposure = exposure.model_copy(update={"resist_index": own_index})
        self.exposure = exposure
        self.field = entry.field
        self.optional = entry.optional

        def pick(key: str, fallback: float) -> float:
            own = getattr(entry, key)
            if own is not None:
                return own
            shared = getattr(defaults, key)
            return shared if shared is not None else fallback

        self.k1_risk_below = pick("k1_risk_below", LIMIT_DEFAULTS["k1_risk_below"])
        self.k1_marginal_below = pick("k1_marginal_below", LIMIT_DEFAULTS["k1_marginal_below"])
        self.min_run_nm = pick("min_run_nm", MIN_RUN_LAMBDA_NA * exposure.lambda_over_na_nm)
        self.interaction_range_nm = pick(
            "interaction_range_nm", INTERACTION_RANGE_LAMBDA_NA * exposure.lambda_over_na_nm
        )
        self.compact_max_nm = pick("compact_max_nm", COMPACT_LAMBDA_NA * exposure.lambda_over_na_nm)
        self.line_end_pullback_max_nm = pick(
            "line_end_pullback_max_nm", PULLBACK_LAMBDA_NA * exposure.lambda_over_na_nm
        )
        self.pitch_tolerance_nm = pick("pitch_tolerance_nm", LIMIT_DEFAULTS["pitch_tolerance_nm"])
        self.dense_min_lines = int(pick("dense_min_lines", LIMIT_DEFAULTS["dense_min_lines"]))
        for key in (
            "image_checks",
            "nils_fail_below",
            "nils_risk_below",
            "nils_marginal_below",
            "el_min_pct",
            "cd_tolerance_pct",
            "focus_steps",
        ):
            setattr(self, key, pick(key, LIMIT_DEFAULTS[key]))
        quarter_wave = quarter_wave_focus_nm(exposure)
        self.dof_min_nm = pick("dof_min_nm", quarter_wave)
        self.focus_half_range_nm = pick("focus_half_range_nm", quarter_wave)
        self.resist_blur_nm = float(pick("resist_blur_nm", 0.0))
        self.edge_placement_max_pct = float(
            pick("edge_placement_max_pct", self.cd_tolerance_pct / 2.0)
        )
        self.anchor = pick("anchor", None)
        self.sizing = pick("sizing", "drawn")
        self.bias_max_nm = float(pick("bias_max_nm", BIAS_LAMBDA_NA * exposure.lambda_over_na_nm))

    @property
    def focus_span_nm(self) -> float:
        """The widest depth of focus the sampled focus values can show."""
        return 0.0 if len(self.focus_nm) == 1 else 2.0 * self.focus_half_range_nm

    @property
    def focus_nm(self) -> tuple[float, ...]:
        """Focus values sampled for the image checks (nm, symmetric, includes 0)."""
        n = self.focus_steps
        if n == 1 or self.focus_half_range_nm == 0:
            return (0.0,)
        h = self.focus_half_range_nm
        return tuple(-h + 2 * h * k / (n - 1) for k in range(n))

    @property
    def source(self) -> str:
        return f"{self.layer}/{self.datatype}"

    def __repr__(self) -> str:
        return f"LayerRule({self.name!r}, {self.source}, exposure={self.exposure_name!r})"


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
        for i, (rule, entry) in enumerate(zip(self.layers, raw.layers, strict=True)):
            if rule.k1_risk_below > rule.k1_marginal_below:
                own = entry.k1_risk_below is not None or entry.k1_marginal_below is not None
                key = f"layers[{i}]" if own else "layer_defaults"
                raise DeckError(
                    f"{self._where()}: {key}.k1_risk_below: {rule.k1_risk_below} must not "
                    f"exceed k1_marginal_below ({rule.k1_marginal_below}) for layer {rule.name!r}"
                )
        for i, (rule, entry) in enumerate(zip(self.layers, raw.layers, strict=True)):
            if rule.sizing == "retarget" and rule.anchor is None:
                key = f"layers[{i}]" if entry.sizing is not None else "layer_defaults"
                raise DeckError(
                    f'{self._where()}: {key}.sizing: "retarget" sizes each feature to print '
                    f"on size at the anchored dose; layer {rule.name!r} has no anchor"
                )
            index = rule.exposure.resist_index
            if index is not None and rule.exposure.na >= index:
                key = f"layers[{i}]" if entry.resist_index is not None else "layer_defaults"
                raise DeckError(
                    f"{self._where()}: {key}.resist_index: "
                    f"{resist_index_message(index, rule.exposure.na)} (layer {rule.name!r})"
                )
            if rule.image_checks and rule.dof_min_nm > rule.focus_span_nm * (1 + 1e-9):
                key = f"layers[{i}]" if entry.dof_min_nm is not None else "layer_defaults"
                raise DeckError(
                    f"{self._where()}: {key}.dof_min_nm: {rule.dof_min_nm:g} nm cannot be "
                    f"measured on layer {rule.name!r}: its focus samples span "
                    f"{rule.focus_span_nm:g} nm (focus_half_range_nm "
                    f"{rule.focus_half_range_nm:g} x 2, focus_steps {rule.focus_steps}); widen "
                    "the range or lower the floor"
                )
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
    try:
        raw = DeckFile.model_validate(data)
    except ValidationError as exc:
        raise DeckError(validation_message(where, exc, data)) from None
    for name, exp in raw.exposures.items():
        if not math.isfinite(exp.wavelength_nm) or not math.isfinite(exp.na):
            raise DeckError(f"{where}: exposures.{name}: values must be finite")
    return Deck(raw, path, text)


def load_deck(path: str | Path) -> Deck:
    """Read and validate a deck file.  Raises DeckError with a one-line message."""
    p = Path(path)
    return parse_deck(read_input_text(p, "deck", DeckError), p)
