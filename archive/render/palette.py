"""Our colours, shared by the plots and the site's charts, and the one mapping of verdict and status names to
tones. A name missing from :data:`TONES` (a verdict added later, a status spelled differently) gets the neutral
tone, so new names show as plain labels rather than breaking anything. Colour is never the only signal: every
coloured mark carries its name as text."""

PALETTE = ["#1b6f8a", "#c9642b", "#5a8f3c", "#8a4f9e", "#b0353f", "#6b6b6b", "#d1a23b"]

NEUTRAL = "neutral"

#: verdict, trust-check status, decision or test status -> tone
TONES: dict[str, str] = {
    "winner": "good",
    "leaning-better": "lean-good",
    "flat": "neutral",
    "inconclusive": "neutral",
    "trade-off": "mixed",
    "leaning-worse": "lean-bad",
    "loser": "bad",
    "ok": "good",
    "passed": "good",
    "check": "warn",
    "warning": "warn",
    "failed": "bad",
    "ship": "good",
    "keep-control": "neutral",
    "iterate": "warn",
    "running": "info",
    "planned": "info",
}

#: tone -> (ink: text, border and chart marks; tint: background of a label)
TONE_COLOURS: dict[str, tuple[str, str]] = {
    "good": ("#3f6e26", "#e4efdc"),
    "lean-good": ("#5a7d2c", "#f0f4e3"),
    "neutral": ("#545454", "#eeeeec"),
    "mixed": ("#6e3f80", "#efe6f3"),
    "lean-bad": ("#9a5a1c", "#f8ecdf"),
    "bad": ("#a02f38", "#f7e1e2"),
    "warn": ("#86661a", "#f8f0d9"),
    "info": ("#1b6f8a", "#e2eff4"),
}


def tone(name: str) -> str:
    """The tone of a verdict or status name (case-insensitive); the neutral tone for names not listed."""
    return TONES.get(name.strip().lower(), NEUTRAL)
