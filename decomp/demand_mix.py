"""Demand models for generated networks: which family each product's demand follows.

A :class:`DemandMix` gives each product a family, drawn at random with the
mix's shares, and a spread within the family's range:

========  ============================================  =========================
family    demand                                        spread (range per product)
========  ============================================  =========================
normal    N(mean, std^2), floored at 0                  CV = std / mean
gamma     gamma with the product's mean and std         CV = std / mean
poisson   Poisson(mean)                                 none (std = sqrt(mean))
negbin    negative binomial with this mean and std      variance / mean (> 1)
known     the mean itself (std = 0)                     none
========  ============================================  =========================

For ``normal`` and ``gamma`` without a range the product keeps the CV the
generator drew (its ``cv`` parameter). ``negbin`` without a range has
variance / mean 2.25 (std = 1.5 sqrt(mean)).

The mix is applied after the network and the means are drawn, from a random
stream of its own (seeded by the generator's seed), so the same network
carries any demand model and a network generated without a mix is exactly
what it was before mixes existed. Text form, for the command line:
``"poisson 0.35, negbin 0.15 2-3, gamma 0.15, normal 0.25 0.02-0.3, known 0.1"``
(family, share, optional spread range), or one of the named mixes in
:data:`NAMED`.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .errors import ConfigError
from .generator import round_sig

FAMILIES = ("normal", "gamma", "poisson", "negbin", "known")
#: Families whose spread is a range the user may give, and what it means.
SPREAD_MEANS = {"normal": "CV (std / mean)", "gamma": "CV (std / mean)", "negbin": "variance / mean"}
#: negbin's variance / mean when no range is given.
NEGBIN_DEFAULT_VMR = 2.25
#: Seed offset of the mix's own random stream (kept apart from the generator's draws).
_STREAM = 0x6D1F


@dataclasses.dataclass(frozen=True)
class Part:
    """One family's share of the products and its spread range (None: the default)."""

    family: str
    share: float
    spread: tuple[float, float] | None = None

    def text(self) -> str:
        out = f"{self.family} {self.share:g}"
        if self.spread is not None:
            lo, hi = self.spread
            out += f" {lo:g}" if lo == hi else f" {lo:g}-{hi:g}"
        return out


@dataclasses.dataclass(frozen=True)
class DemandMix:
    """Shares of the demand families over the products (they add up to 1)."""

    parts: tuple[Part, ...]

    def __post_init__(self):
        object.__setattr__(self, "parts", tuple(self.parts))
        _check(self.parts)

    @classmethod
    def parse(cls, text: str) -> "DemandMix":
        """A mix from its text form or a name of :data:`NAMED` (ConfigError if malformed)."""
        text = str(text).strip()
        if text.lower() in NAMED:
            return NAMED[text.lower()]
        parts = []
        for item in text.split(","):
            words = item.split()
            if not 2 <= len(words) <= 3:
                raise ConfigError(f"demand mix: {item.strip()!r} is not 'family share [low-high]' "
                                  f"(e.g. 'negbin 0.15 2-3'); families: {', '.join(FAMILIES)}; "
                                  f"named mixes: {', '.join(NAMED)}")
            family = words[0].lower()
            share = _number(words[1], item)
            spread = _range(words[2], item) if len(words) == 3 else None
            parts.append(Part(family, share, spread))
        return cls(tuple(parts))

    def text(self) -> str:
        return ", ".join(p.text() for p in self.parts)

    def to_dict(self) -> list:
        return [{"family": p.family, "share": p.share,
                 "spread": None if p.spread is None else list(p.spread)} for p in self.parts]

    @classmethod
    def from_dict(cls, parts) -> "DemandMix":
        return cls(tuple(Part(p["family"], float(p["share"]),
                              None if p.get("spread") is None else tuple(p["spread"])) for p in parts))

    @property
    def is_plain_normal(self) -> bool:
        """Every product normal with the generator's own CV (the mix changes nothing)."""
        return len(self.parts) == 1 and self.parts[0].family == "normal" and self.parts[0].spread is None


def _number(word, item) -> float:
    try:
        v = float(word)
    except ValueError:
        raise ConfigError(f"demand mix: {word!r} in {item.strip()!r} is not a number") from None
    return v


def _range(word, item) -> tuple[float, float]:
    lo, sep, hi = word.partition("-")
    lo_v = _number(lo, item)
    hi_v = _number(hi, item) if sep else lo_v
    return (lo_v, hi_v)


def _check(parts):
    if not parts:
        raise ConfigError("demand mix: no family given")
    seen = set()
    for p in parts:
        if p.family not in FAMILIES:
            raise ConfigError(f"demand mix: unknown family {p.family!r}; families: {', '.join(FAMILIES)}")
        if p.family in seen:
            raise ConfigError(f"demand mix: family {p.family!r} given twice")
        seen.add(p.family)
        if not (math.isfinite(p.share) and 0 < p.share <= 1):
            raise ConfigError(f"demand mix: the share of {p.family} must be in (0, 1], got {p.share!r}")
        if p.spread is None:
            continue
        if p.family not in SPREAD_MEANS:
            raise ConfigError(f"demand mix: {p.family} takes no spread range (its spread is fixed)")
        lo, hi = p.spread
        least = 1.0 if p.family == "negbin" else 0.0
        if not (math.isfinite(lo) and math.isfinite(hi) and least < lo <= hi):
            raise ConfigError(f"demand mix: the {SPREAD_MEANS[p.family]} range of {p.family} must be "
                              f"low-high with {least:g} < low <= high, got {lo:g}-{hi:g}")
    total = sum(p.share for p in parts)
    if abs(total - 1.0) > 1e-9:
        raise ConfigError(f"demand mix: the shares add up to {total:g}, not 1")


#: Named mixes: the ladder's own (normal with the generator's CV), single families, and a
#: production-like night mixing them.
NAMED = {
    "normal": DemandMix((Part("normal", 1.0),)),
    "gamma": DemandMix((Part("gamma", 1.0),)),
    "lowcv": DemandMix((Part("normal", 1.0, (0.02, 0.15)),)),
    "poisson": DemandMix((Part("poisson", 1.0),)),
    "negbin": DemandMix((Part("negbin", 1.0, (NEGBIN_DEFAULT_VMR, NEGBIN_DEFAULT_VMR)),)),
    "mix": DemandMix((Part("poisson", 0.35), Part("negbin", 0.15), Part("gamma", 0.15),
                      Part("normal", 0.25, (0.02, 0.3)), Part("known", 0.10))),
}


def apply(instance, mix: DemandMix, seed: int):
    """The instance with each product's demand family and std drawn from ``mix``.

    Means, fares and the network are kept. Deterministic in (instance, mix, seed).
    """
    if mix.is_plain_normal:
        return instance
    rng = np.random.default_rng([int(seed), _STREAM])
    n = instance.n_products
    shares = np.array([p.share for p in mix.parts])
    which = rng.choice(len(mix.parts), size=n, p=shares / shares.sum())
    u = rng.uniform(0.0, 1.0, n)                     # one draw per product, whatever its family
    mean = np.asarray(instance.mean, dtype=np.float64)
    std = np.array(instance.std, dtype=np.float64)
    names = np.empty(n, dtype=object)
    for k, part in enumerate(mix.parts):            # a loop over families, not products
        sel = which == k
        m = mean[sel]
        spread = None if part.spread is None else part.spread[0] + (part.spread[1] - part.spread[0]) * u[sel]
        if part.family in ("normal", "gamma"):
            names[sel] = part.family
            if spread is not None:
                std[sel] = round_sig(m * spread, 4)
        elif part.family == "poisson":
            names[sel] = "poisson"
            std[sel] = round_sig(np.sqrt(m), 4)
        elif part.family == "negbin":
            names[sel] = "negbin"
            vmr = np.full(len(m), NEGBIN_DEFAULT_VMR) if spread is None else spread
            s = round_sig(np.sqrt(vmr * m), 4)
            # rounding must keep std^2 > mean (the family's condition)
            low = s * s <= m * (1.0 + 1e-9)
            s[low] = round_sig(np.sqrt(m[low] * (1.0 + 1e-3)) * 1.001, 4)
            std[sel] = s
        else:                                         # known demand
            names[sel] = "normal"
            std[sel] = 0.0
    distribution = None if np.all(names == "normal") else names
    return dataclasses.replace(instance, std=std, distribution=distribution)
