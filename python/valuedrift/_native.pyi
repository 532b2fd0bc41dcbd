"""Type hints of the extension module valuedrift._native (src/python/mod.rs)."""

from typing import Callable, Optional, Sequence

RESEARCH_CAUTION: str

class ValuedriftError(Exception):
    """A valuedrift command failed; the message is the one the command line prints."""

def run(args: Sequence[str], progress: Optional[Callable[[str, int, int], object]] = None) -> None:
    """Runs one `valuedrift` command line (without the program name) without holding the GIL;
    Ctrl-C stops it (nothing written) and raises KeyboardInterrupt."""

def first_passage(quantity: str, arrays: Sequence[object], seed: int = 1) -> bytes:
    """The engine on nine flat float64 arrays of one length (rt, upper, drift, boundary, start,
    ndt, drift_sd, start_range, ndt_range); float64 values as bytes."""

def model_text(name: Optional[str] = None) -> str:
    """What `valuedrift models [NAME]` prints."""

def model_parameters(
    name: Optional[str] = None,
) -> list[tuple[str, str, str, float, float, float, float, Optional[float], str]]:
    """(model, origin, parameter, lower, upper, start_low, start_high, fixed, description)."""
