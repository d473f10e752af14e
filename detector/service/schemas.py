"""Request and response models of the service (input and output kept apart); errors are ``{error, detail, field}``."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

__all__ = [
    "ErrorOut", "ChannelIn", "RecordIn", "ComparisonJsonIn", "ComparisonOut", "WaveshapeOut",
    "StepIn", "SequenceIn", "SequenceOut", "ShotOut", "ModelOut", "HealthOut", "ReadyOut",
    "MULTIPART_RECORD_SCHEMA",
]


class ErrorOut(BaseModel):
    """Every error answer: a stable code, a sentence for a person, and the offending field if any."""

    error: str = Field(description="stable error code, e.g. 'invalid_record', 'unauthorized', 'busy'")
    detail: str = Field(description="what is wrong and what was expected")
    field: str | None = Field(default=None, description="request field concerned, e.g. 'test.channels[1].unit'")


class ChannelIn(BaseModel):
    """One channel of a JSON record."""

    model_config = ConfigDict(extra="forbid")
    name: str = Field(max_length=200)
    unit: str = Field(description="voltage or current unit: V, kV, MV, A, mA, kA", max_length=20)
    quantity: Literal["voltage", "current"] | None = None
    samples: list[float] = Field(min_length=16, description="sample values in the given unit")


class RecordIn(BaseModel):
    """A record as JSON: time base, channels with units, metadata."""

    model_config = ConfigDict(extra="forbid")
    sample_interval_s: float = Field(gt=0, description="interval between samples [s]")
    start_time_s: float = Field(default=0.0, description="time of the first sample [s]")
    channels: list[ChannelIn] = Field(min_length=1)
    meta: dict[str, Any] = Field(default_factory=dict)


class ComparisonJsonIn(BaseModel):
    """JSON form of ``POST /v1/comparisons``."""

    model_config = ConfigDict(extra="forbid")
    reference: RecordIn
    test: RecordIn
    voltage_channel: str | None = None
    current_channel: str | None = None


class ComparisonOut(BaseModel):
    """A comparison: its id plus the verdict JSON of DESIGN.md section 6."""

    model_config = ConfigDict(extra="allow")
    id: str
    status: Literal["done"]
    reference_name: str
    test_name: str
    created_at: str
    fault_indicated: bool
    event: str
    probabilities: dict[str, float]
    fault_time_us: float | None
    location: float | None
    metrics: dict[str, Any]
    exceeded: list[dict[str, Any]]
    waveshape: dict[str, Any]
    warnings: list[str]
    model: dict[str, Any]
    report_url: str


class WaveshapeOut(BaseModel):
    """IEC 60060-1 parameters of one record."""

    model_config = ConfigDict(extra="allow")
    kind: str
    peak_kV: float | None
    test_voltage_kV: float | None
    front_time_us: float | None
    time_to_half_us: float | None
    overshoot_percent: float | None
    chopping_time_us: float | None
    within_tolerance: bool | None
    warnings: list[str]


class StepIn(BaseModel):
    """One planned shot."""

    model_config = ConfigDict(extra="forbid")
    kind: Literal["reduced", "full", "chopped", "reduced_chopped"]
    level_percent: float = Field(gt=0, le=200)


class SequenceIn(BaseModel):
    """A new test sequence of one terminal of one unit."""

    model_config = ConfigDict(extra="forbid")
    unit_id: str = Field(min_length=1, max_length=100, examples=["KR-2291-07"])
    terminal: str = Field(min_length=1, max_length=100, examples=["1U"])
    plan: Literal["iec", "iec_chopped", "ieee"] | list[StepIn] = Field(
        default="iec", description="a named order or a list of steps; 'iec' is reduced 75 %, full 100 %, "
        "chopped 115 % twice, full 100 %, reduced 75 %; 'iec_chopped' is reduced 75 %, full 100 %, reduced "
        "chopped 75 %, chopped 115 % twice, full 100 % twice, reduced 75 %")
    meta: dict[str, Any] = Field(default_factory=dict)


class ShotOut(BaseModel):
    """A shot of a sequence with its role, wave shape and comparison verdict."""

    model_config = ConfigDict(extra="allow")
    id: str
    sequence_id: str
    position: int
    name: str
    kind: str
    level_percent: float
    role: Literal["reference", "reduced_check", "test", "closing", "chopped_reference", "chopped_check"]
    waveshape: dict[str, Any]
    comparison: dict[str, Any] | None
    warnings: list[str]
    created_at: str


class SequenceOut(BaseModel):
    """A sequence, its shots and its summary verdict."""

    model_config = ConfigDict(extra="allow")
    id: str
    unit_id: str
    terminal: str
    plan: list[dict[str, Any]]
    meta: dict[str, Any]
    created_at: str
    shots: list[ShotOut]
    summary: dict[str, Any]


class ModelOut(BaseModel):
    """The model card of the loaded model."""

    model_config = ConfigDict(extra="allow")
    id: str
    schema_version: str
    feature_names: list[str]
    thresholds: dict[str, float]
    card: dict[str, Any]


class HealthOut(BaseModel):
    """Liveness."""

    status: Literal["ok"]
    version: str


class ReadyOut(BaseModel):
    """Readiness: the model is loaded and the store answers."""

    status: Literal["ready"]
    model: str
    store_schema_version: int
    comparisons: dict[str, int]


def _multipart(fields: dict[str, str], extra: dict[str, Any] | None = None) -> dict[str, Any]:
    props: dict[str, Any] = {
        name: {"type": "array", "items": {"type": "string", "format": "binary"}, "description": desc}
        for name, desc in fields.items()
    }
    props.update(extra or {})
    return {"type": "object", "properties": props, "required": list(fields)}


#: OpenAPI request body of record uploads (multipart), used by the routes' ``openapi_extra``.
MULTIPART_RECORD_SCHEMA = _multipart
