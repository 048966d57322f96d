"""The energy-balanced tone pair: a lift curve for open mask, a cut curve for closed.

For one channel with mask value m in [0, 1] and mask mean mu over a period
cell, a pixel of linear value x becomes

    y = x + k (L(x) - x),   k = (m - mu) / (1 - mu)

which is the linear mix C + m (L - C) of a lift curve L (where the mask is
open) and the cut curve C(x) = (x - mu L(x)) / (1 - mu) (where it is closed).
Over a cell of constant x the mean output is exactly x. The pair is admissible
when 0 <= C(x) <= x <= L(x) <= 1 on [0, 1]; C >= 0 holds exactly when
L(x) <= x / mu, so for a concave L with L(0) = 0 the slope at black must not
exceed 1 / mu.

Curve families (keys of :data:`CURVES`):

``blend``
    L(x) = 1 - (1 - x)^n (1 - t x), n = floor(s), t = s - n: the mix
    (1 - t) L_n + t L_(n+1) of neighbouring degrees of L_n = 1 - (1 - x)^n.
    Concave, meets white smoothly, slope exactly s at black, continuous in s.
``integer``
    L_n with the whole degree n = floor(s); n = 1 is the identity (no mask).
``exponent``
    L(x) = 1 - (1 - x)^s with a real exponent.
``piecewise``
    L = min(1, x / mu): the strongest admissible pair, with a kink at x = mu.
``multiply``
    Not a balanced pair: L(x) = x, C(x) = 0, so y = m x, the plain multiply
    whose darkening the others avoid. For comparisons and for testing gates.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import SettingsError, check_choice

CURVES = {
    "blend": "mix of two neighbouring polynomial degrees; slope s at black (default)",
    "integer": "polynomial 1 - (1 - x)^n with a whole degree n = floor(s)",
    "exponent": "1 - (1 - x)^s with a real exponent s",
    "piecewise": "min(1, x / mu): strongest, with a kink at x = mu",
    "multiply": "no balance: a plain multiply by the mask (y = m x), which darkens; for comparison",
}

#: The families that hold the light.
BALANCED_CURVES = tuple(c for c in CURVES if c != "multiply")

#: Tolerance of the admissibility check on a dense grid (float64 round-off).
_ADMISSIBLE_TOL = 1e-9

#: A mask whose mean is this close to 1 is taken as fully open: there is no
#: structure to show, and (x - mu L) / (1 - mu) would only amplify round-off.
OPEN_MASK = 1.0 - 1e-6


#: The allowed range of each number setting of the tone curves (what the preset loader
#: and the tuning page allow).
LIMITS = {"softness": (0.0, 1.0), "slope": (1.0, 64.0), "light_share": (0.5, 1.0)}


@dataclass(frozen=True)
class ToneSettings:
    """Which lift curve to use and how hard to push it.

    Parameters
    ----------
    curve : str
        A key of :data:`CURVES`.
    softness : float
        0 (the strongest admissible slope, s = 1 / mu) to 1 (s = 1, the
        identity: no mask at all). s = 1 + (1 / mu - 1) (1 - softness).
    slope : float or None
        Ask for an exact slope at black instead; refused when it exceeds 1 / mu.
    balance_tiles : bool
        Make the deviations cancel over every mask period cell, so the
        light holds locally where the picture changes inside a cell (edges,
        fine detail, fractional scales); see
        :func:`crtfilter.pipeline.balance_tiles`.
    light_share : float
        Standard range: the share of the input's light the output holds, 0.5 to
        1. Below 1 it gives up that much light for headroom above the scaled
        white (1 / share), in which the tone pair keeps the mask in highlights.
    """

    curve: str = "blend"
    softness: float = 0.0
    slope: float | None = None
    balance_tiles: bool = True
    light_share: float = 1.0

    def __post_init__(self):
        check_choice("curve", self.curve, CURVES)
        lo, hi = LIMITS["softness"]
        if not (lo <= self.softness <= hi):
            raise SettingsError(f"softness must be between {lo:g} and {hi:g} (got {self.softness!r})")
        lo, hi = LIMITS["slope"]
        if self.slope is not None and not (lo <= self.slope <= hi):
            raise SettingsError(f"slope must be between {lo:g} and {hi:g} (got {self.slope!r})")
        if not isinstance(self.balance_tiles, bool):
            raise SettingsError(f"balance_tiles must be true or false (got {self.balance_tiles!r})")
        lo, hi = LIMITS["light_share"]
        if not (isinstance(self.light_share, (int, float)) and lo <= self.light_share <= hi):
            raise SettingsError(f"light_share must be between {lo:g} and {hi:g} (got {self.light_share!r})")


@dataclass(frozen=True)
class TonePair:
    """A solved, validated lift/cut pair for one channel.

    Attributes
    ----------
    mu : float
        The mask mean the pair balances.
    curve : str
        The family.
    slope : float
        The slope s of the lift curve at black.
    degree : int
        n for the polynomial families (``blend``, ``integer``); 0 otherwise.
    blend : float
        t for ``blend``; 0 otherwise.
    horner : tuple of float
        Polynomial families: coefficients of L / h in u = 1 - x / h, highest
        power first, for Horner evaluation: L / h = (((c0 u + c1) u + c2) ... ) + cN.
    headroom : float
        h = peak / reference white: the most the lift curve may reach (1 on
        standard-range output, where the mask must fade towards white).
    linear : bool
        The lift is L = s x: with enough headroom (s <= h) nothing bends it
        down and the mask never fades.
    """

    mu: float
    curve: str
    slope: float
    degree: int = 0
    blend: float = 0.0
    horner: tuple[float, ...] = field(default=())
    headroom: float = 1.0
    linear: bool = False

    @property
    def balanced(self) -> bool:
        """Whether the pair returns the input's light over a cell (all but ``multiply``)."""
        return self.curve != "multiply"

    def lift(self, x: np.ndarray) -> np.ndarray:
        """Return L(x), same shape and dtype as ``x`` (float)."""
        x = np.asarray(x)
        h = x.dtype.type(self.headroom)
        if self.curve == "multiply":
            return x.copy()
        if self.curve == "piecewise":
            if self.mu >= 1.0:
                return x.copy()
            return np.minimum(x / x.dtype.type(self.mu), h).astype(x.dtype)
        if self.linear:
            return x * x.dtype.type(self.slope)
        u = 1 - x / h
        if self.curve == "exponent":
            return h * (1 - np.power(u, x.dtype.type(self.slope)))
        acc = np.full_like(x, self.horner[0])
        for c in self.horner[1:]:
            acc *= u
            acc += x.dtype.type(c)
        return acc * h if self.headroom != 1.0 else acc

    def cut(self, x: np.ndarray) -> np.ndarray:
        """Return C(x) = (x - mu L(x)) / (1 - mu), same shape as ``x``.

        Evaluated as x - mu (L - x) / (1 - mu), which keeps its digits when
        L is close to x.
        """
        x = np.asarray(x)
        if self.curve == "multiply":
            return np.zeros_like(x)
        if self.mu >= 1.0:
            return x.copy()
        return x - self.mu * (self.lift(x) - x) / (1 - self.mu)

    def visibility(self, x: np.ndarray) -> np.ndarray:
        """Return the Michelson contrast (L - C) / (L + C) at level x.

        At black both curves are 0; the value there is the limit from above.
        """
        x = np.asarray(x, dtype=np.float64)
        x = np.where(x > 0, x, 1e-9)
        lo, hi = self.cut(x), self.lift(x)
        total = hi + lo
        return np.divide(hi - lo, total, out=np.zeros_like(total), where=total > 0)

    def apply(self, x: np.ndarray, k: np.ndarray) -> np.ndarray:
        """Return y = x + k (L(x) - x) for mask weights k = (m - mu) / (1 - mu).

        For ``multiply``, y = m x with m = mu + k (1 - mu).
        """
        return x + self.deviation(x, k)

    def deviation(self, x: np.ndarray, k: np.ndarray) -> np.ndarray:
        """Return y - x: k (L(x) - x), or (m - 1) x for ``multiply``."""
        if self.curve == "multiply":
            return (1 - self.mu) * (k - 1) * x
        return k * (self.lift(x) - x)

    def in_words(self) -> str:
        """The pair for people: the family, its degree, the slope at black, and what it does
        to 18 % and 50 % grey (linear) where the mask is open and where it is closed.

        >>> from crtfilter.tone import tone_pair
        >>> tone_pair(0.5).in_words()
        'blend of degree 2, slope 2.00 at black; 18 % lifts to 32.8 % where the mask is open, cut to 3.2 % where closed; 50 % to 75.0 %, cut to 25.0 %'
        """
        if self.curve == "multiply":
            return "plain multiply, no lift: darkens by the mask mean"
        x = np.array([0.18, 0.5])
        lift, cut = self.lift(x), self.cut(x)
        kind = {"blend": f"blend of degree {self.degree}", "integer": f"polynomial of degree {self.degree}",
                "exponent": "exponent curve", "piecewise": "straight lift, clipped at white"}[self.curve]
        if self.linear:
            kind = "straight lift within the headroom (the mask never fades)"
        return (f"{kind}, slope {self.slope:.2f} at black; 18 % lifts to {100 * lift[0]:.1f} % where the mask "
                f"is open, cut to {100 * cut[0]:.1f} % where closed; 50 % to {100 * lift[1]:.1f} %, cut to "
                f"{100 * cut[1]:.1f} %")

    def describe(self) -> str:
        """One line naming the curve, its slope and its Horner coefficients (for JSON)."""
        room = f"; headroom {self.headroom:.4g}" if self.headroom != 1.0 else ""
        if self.linear and self.curve != "multiply":
            return f"{self.curve}: L = {self.slope:.4f} x, within headroom {self.headroom:.4g}: the mask never fades"
        if self.curve in ("blend", "integer") and room:
            coeffs = ", ".join(f"{c:.6g}" for c in self.horner)
            return (f"{self.curve}: degree {self.degree}, blend {self.blend:.4f}, slope {self.slope:.4f}{room}; "
                    f"L / h in u = 1 - x / h, Horner from the top: [{coeffs}]")
        if self.curve in ("blend", "integer"):
            coeffs = ", ".join(f"{c:.6g}" for c in self.horner)
            return (f"{self.curve}: degree {self.degree}, blend {self.blend:.4f}, slope {self.slope:.4f}; "
                    f"L in u = 1 - x, Horner from the top: [{coeffs}]")
        if self.curve == "exponent":
            return f"exponent: L = 1 - (1 - x)^{self.slope:.4f}"
        if self.curve == "multiply":
            return "multiply: y = m x, not balanced (darkens)"
        return f"piecewise: L = min(1, x / {self.mu:.4f}), slope {self.slope:.4f}"


def _horner_in_u(n: int, t: float) -> tuple[float, ...]:
    # L = 1 - (1 - t) u^n - t u^(n + 1), with u = 1 - x.
    coeffs = [0.0] * (n + 2)  # highest power (n + 1) first
    coeffs[0] = -t
    coeffs[1] = -(1.0 - t)
    coeffs[-1] += 1.0
    return tuple(coeffs)


def tone_pair(mu: float, settings: ToneSettings = ToneSettings(), *, headroom: float = 1.0) -> TonePair:
    """Solve and validate the tone pair for a mask of mean ``mu``.

    Parameters
    ----------
    mu : float
        Mask mean over a period cell, in (0, 1].
    settings : ToneSettings
    headroom : float
        h >= 1: how far above the input's white the lift may go (peak /
        reference white on HDR output). Where the slope s <= h the lift is the
        straight line s x and the mask never fades; otherwise the family is
        scaled into the headroom, L(x) = h L_s(x / h).

    Returns
    -------
    TonePair

    Raises
    ------
    SettingsError
        When the requested slope is inadmissible for this mask, with the reason
        in numbers.
    """
    mu = float(mu)
    if not (0.0 < mu <= 1.0) or math.isnan(mu):
        raise SettingsError(f"mask mean must be in (0, 1] (got {mu})")
    if not (1.0 <= headroom <= 1000.0):
        raise SettingsError(f"headroom must be between 1 and 1000 (got {headroom})")
    if mu >= OPEN_MASK:
        return TonePair(1.0, "integer", 1.0, 1, 0.0, _horner_in_u(1, 0.0), headroom)
    top = 1.0 / mu
    if settings.slope is not None:
        s = float(settings.slope)
        if s > top * (1 + 1e-12):
            raise SettingsError(
                f"slope {s:g} needs mask mean <= {1 / s:.4g}; this mask's mean is {mu:.4g}"
            )
    else:
        s = 1.0 + (top - 1.0) * (1.0 - settings.softness)
    h = float(headroom)
    if settings.curve == "multiply":
        pair = TonePair(mu, "multiply", 1.0, headroom=h)
    elif settings.curve == "piecewise":
        pair = TonePair(mu, "piecewise", top, headroom=h)
    elif h > 1.0 and s <= h * (1 + 1e-12):
        pair = TonePair(mu, settings.curve, s, headroom=h, linear=True)
    elif settings.curve == "exponent":
        pair = TonePair(mu, "exponent", s, headroom=h)
    else:
        n = int(math.floor(s + 1e-12))
        t = 0.0 if settings.curve == "integer" else min(max(s - n, 0.0), 1.0)
        if t < 1e-12:
            t = 0.0
        pair = TonePair(mu, settings.curve, n + t, n, t, _horner_in_u(n, t), headroom=h)
    _validate(pair)
    return pair


def _validate(pair: TonePair) -> None:
    x = np.linspace(0.0, 1.0, 4097)
    lift, cut = pair.lift(x), pair.cut(x)
    tol = _ADMISSIBLE_TOL
    problems = []
    if (cut < -tol).any():
        i = int(np.argmin(cut))
        problems.append(f"cut curve falls to {cut[i]:.3g} at x = {x[i]:.3g}")
    if (cut > x + tol).any() or (lift < x - tol).any():
        problems.append("lift curve dips below the identity")
    if (lift > pair.headroom + tol).any():
        problems.append(f"lift curve exceeds {pair.headroom:.6g} ({lift.max():.6g})")
    if problems:
        raise SettingsError(
            f"{pair.curve} curve with slope {pair.slope:.4g} is inadmissible for mask mean "
            f"{pair.mu:.4g}: " + "; ".join(problems)
        )


def solve_channels(mean: np.ndarray, settings: ToneSettings = ToneSettings(), *,
                   headroom: float = 1.0) -> tuple[TonePair, ...]:
    """Solve one tone pair per channel for a per-channel mask mean.

    Returns
    -------
    tuple of TonePair
        One per entry of ``mean`` (length 3 for RGB).
    """
    return tuple(tone_pair(float(m), settings, headroom=headroom) for m in np.asarray(mean).ravel())
