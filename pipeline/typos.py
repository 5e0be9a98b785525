"""Did-you-mean hints: the known name nearest a mistyped one, by Damerau–Levenshtein
distance (optimal string alignment), shared by every place that rejects an unknown name."""

from __future__ import annotations

MAX_TYPO_EDITS = 2  # a name this many edits from a known one gets a "did you mean" hint


def edit_distance(a: str, b: str) -> int:
    """Damerau–Levenshtein distance (optimal string alignment): insertions, deletions,
    substitutions and swaps of two neighbouring characters each count one edit."""
    previous2, previous = None, list(range(len(b) + 1))
    for i in range(1, len(a) + 1):
        current = [i] + [0] * len(b)
        for j in range(1, len(b) + 1):
            cost = 0 if a[i - 1] == b[j - 1] else 1
            current[j] = min(previous[j] + 1, current[j - 1] + 1, previous[j - 1] + cost)
            if i > 1 and j > 1 and a[i - 1] == b[j - 2] and a[i - 2] == b[j - 1]:
                current[j] = min(current[j], previous2[j - 2] + 1)
        previous2, previous = previous, current
    return previous[-1]


def nearest(word: str, choices) -> str | None:
    """The choice fewest edits away from `word` (ties: the first in sorted order), if it
    is at most MAX_TYPO_EDITS away and changes at most half of the word (one edit always
    allowed): 'dip' hints 'dpi', but 'far' does not hint 'near'."""
    ranked = sorted((edit_distance(word.lower(), c.lower()), c) for c in choices)
    if ranked and ranked[0][0] <= min(MAX_TYPO_EDITS, max(1, len(word) // 2)):
        return ranked[0][1]
    return None
