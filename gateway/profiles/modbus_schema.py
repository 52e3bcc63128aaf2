"""Schema of a Modbus station's single last-result block (``[modbus.latest]``), pydantic v2.

Some stations keep no ring: one block holds the newest result. What tells the gateway that the
block is new, and what it must write back, differs by station, so each is stated:

- ``detect = "counter"``: a counter (the cycle inside the block) differs from the one handled.
  The block, counter included, is read in one request; a station holding it until acknowledged
  (a queue presenting its oldest record) cannot change it in between.
- ``detect = "flag"``: a "new result" bit (coil, discrete input or a register bit) is 1. The
  station does not touch the block while the flag is 1, so one read is consistent; the flag is
  cleared only after the record is journalled-bound (handed to the outbox).
- ``detect = "change"``: nothing but the block itself. A changed block is taken only when two
  consecutive reads agree (the station may be writing it during the first).

Under every rule a block of zeros is no record: it was never written (a station just powered
up, or one that clears its block after the acknowledge). At first contact the block the
station holds is taken once, unless its cycle is the newest one already journalled.

A write happens only through ``ack`` entries: never otherwise.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Literal, NoReturn

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

__all__ = ["AckAction", "BitsSource", "FlagSource", "LatestRule", "apply_latest"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class FlagSource(_Strict):
    """Where a "new result" flag lives: a coil (1), discrete input (2) or a register bit."""

    function: Literal[1, 2, 3, 4]
    address: int = Field(ge=0, le=65535)
    bit: int = Field(default=0, ge=0, le=15, description="bit of the register (functions 3, 4)")


class BitsSource(_Strict):
    """Coils (1) or discrete inputs (2) read with the block and packed into one more word
    after it (input ``i`` is bit ``i``), so fields take them with ``at``, ``bit`` or ``mask``."""

    function: Literal[1, 2]
    address: int = Field(ge=0, le=65535)
    count: int = Field(ge=1, le=16)


class AckAction(_Strict):
    """One write after a record is taken: the cycle, a constant, or clearing a flag."""

    function: Literal[5, 6, 16] = Field(description="5 coil, 6 one register, 16 registers")
    address: int = Field(ge=0, le=65535)
    value: Literal["cycle", "clear"] | int = Field(
        description='"cycle" writes the cycle read, "clear" writes 0, an integer is written as is'
    )
    type: Literal["uint16", "uint32"] = "uint16"

    @model_validator(mode="after")
    def _coil_values(self) -> AckAction:
        if self.function == 5 and self.value not in ("clear", 0, 1):
            raise ValueError("a coil (function 5) takes 0, 1 or \"clear\"")
        return self


class LatestRule(_Strict):
    """How the newest result is detected in a single block and acknowledged."""

    detect: Literal["counter", "flag", "change"]
    address: int = Field(ge=0, le=65535, description="first register of the block")
    length: int = Field(ge=1, le=125, description="registers in the block (one read)")
    cycle_at: int = Field(ge=0, description="offset of the cycle number in the block")
    cycle_type: Literal["uint16", "uint32"] = "uint16"
    word_order: Literal["big", "little"] = "big"
    byte_order: Literal["big", "little"] = "big"
    flag: FlagSource | None = None
    ack: tuple[AckAction, ...] = ()
    bits: BitsSource | None = None
    record: Literal["result", "calibration"] = "result"

    @model_validator(mode="after")
    def _consistent(self) -> LatestRule:
        width = 2 if self.cycle_type == "uint32" else 1
        if self.cycle_at + width > self.length:
            raise ValueError(f"cycle_at {self.cycle_at} lies outside the {self.length}-register "
                             "block")
        if (self.detect == "flag") != (self.flag is not None):
            raise ValueError('a "flag" table is required with detect = "flag", and only then')
        return self

    @property
    def words(self) -> int:
        """Words a record is decoded from: the block, plus one packing ``bits`` if given."""
        return self.length + (1 if self.bits is not None else 0)

    @property
    def cycle_registers(self) -> int:
        return 2 if self.cycle_type == "uint32" else 1


def apply_latest(modbus: dict[str, object], fail: Callable[[str, str, object], NoReturn]
                 ) -> LatestRule | None:
    """Validate ``[modbus.latest]`` and give ``[modbus.result]`` the one-slot ring it implies.

    A last-result block is read by the ring machinery as a ring of depth 1 whose counter and
    guards are the cycle inside the block, so the result table then needs only ``fields``.
    ``fail(key, expected, got)`` is the loader's one-line error.
    """
    raw = modbus.pop("latest", None)
    if raw is None:
        return None
    try:
        rule = LatestRule.model_validate(raw)
    except ValidationError as exc:
        err = exc.errors()[0]
        where = ".".join(str(p) for p in ("modbus", "latest", *err["loc"]))
        fail(where, str(err["msg"]).removeprefix("Value error, "), err.get("input"))
    result = modbus.get("result")
    if not isinstance(result, dict):
        fail("modbus.result", "a table with the block's fields", result)
    for key in ("counter_address", "base", "stride", "depth", "length", "head_guard",
                "tail_guard", "counter_type"):
        if key in result:
            fail(f"modbus.result.{key}", "no ring keys with [modbus.latest] (it gives them)",
                 result[key])
    result.update(counter_address=rule.address + rule.cycle_at, counter_type=rule.cycle_type,
                  base=rule.address, length=rule.words, depth=1, head_guard=rule.cycle_at,
                  tail_guard=rule.cycle_at)
    return rule
