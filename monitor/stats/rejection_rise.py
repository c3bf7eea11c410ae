"""A rising rejection share: do the recent files lose far more rows than the model's files did?

The long-run share of rejected rows is estimated from the earlier files as ``(r0 + 1/2) / (n0 +
1)`` (Jeffreys' point estimate, so a history without a single rejection still gives a share
above 0). The recent rows' rejections are tested against it with the exact one-sided binomial
test, ``P(X >= r | n, p0)`` (what ``scipy.stats.binomtest(r, n, p0, alternative="greater")``
gives). Rows of one file share their fate (one broken export spoils many), which a row-level
test does not allow for; so a share only counts as rising when it is also far above the long
run in size: at least :data:`RATIO` times it and at least :data:`MIN_SHARE` of the rows (common
practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass

RATIO = 2.0  # the recent share must be at least this multiple of the long-run share ...
MIN_SHARE = 0.01  # ... and at least this share of the recent rows
MIN_PAST_ROWS = 100  # fewer earlier rows than this: no long run to compare with


@dataclass(frozen=True)
class RejectionRise:
    recent_rejected: int
    recent_read: int
    past_rejected: int
    past_read: int
    past_share: float  # Jeffreys' estimate of the long-run share
    pvalue: float  # one-sided exact binomial test: the recent share is higher
    level: float

    @property
    def recent_share(self) -> float:
        return self.recent_rejected / self.recent_read

    @property
    def rising(self) -> bool:
        return (self.pvalue < self.level
                and self.recent_share >= max(RATIO * self.past_share, MIN_SHARE))


def rejection_rise(recent_rejected: int, recent_read: int, past_rejected: int, past_read: int,
                   level: float) -> RejectionRise | None:
    """Test the recent rejections against the long run; None when either side has no rows to
    judge (no recent rows, or fewer than :data:`MIN_PAST_ROWS` earlier ones)."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level}")
    if not (0 <= recent_rejected <= recent_read and 0 <= past_rejected <= past_read):
        raise ValueError("rejected rows must lie between 0 and the rows read")
    if recent_read == 0 or past_read < MIN_PAST_ROWS:
        return None
    # Imported here: the test runs only when recent files lost rows, and ``status`` reaches
    # this module on every call (numpy and scipy would double its start-up).
    from monitor.stats import tails

    share = (past_rejected + 0.5) / (past_read + 1.0)
    pvalue = float(tails.binom_sf(recent_rejected - 1, recent_read, share))
    return RejectionRise(recent_rejected, recent_read, past_rejected, past_read, share,
                         min(1.0, pvalue), level)
