"""Which member of a group of instances owns which space: rendezvous hashing with a hand-over
rule. Pure: no clock, no I/O.

Rendezvous (highest-random-weight) hashing (Thaler and Ravishankar, "Using name-based
mappings to increase hit rates", IEEE/ACM Trans. Networking 6(1), 1998): every space gives
every member a pseudo-random weight computed from the two names; the member with the highest
weight wins the space. Every member that knows the same set of members computes the same
owners, without a coordinator; a member that leaves moves only its own spaces (each to the
member with its second-highest weight), and one that joins takes about 1/(m+1) of the spaces,
from every other member, and nothing else moves.

Members do not learn of a join or a leave at the same moment, so each publishes the member
list it uses (its *view*), and the hand-over rule decides: a member **holds** a space only if
it wins the space in its own view and no other live member wins it in that member's published
view. While a newcomer waits for the old winner to publish a view that includes it, the old
winner keeps the space; the old winner lets go as soon as its own view changes, and the
newcomer takes it when it sees that view. Two members can hold a space together only while
one of them has not yet seen the other's latest view (a message's travel time), and a space
is without a holder only from the moment its holder drops out until the survivors see that
(the liveness bound the shell keeps) or, at a join, for one view's travel time.

Weights are 64-bit: the space and member names are hashed once with BLAKE2b and mixed with
SplitMix64's finaliser (Steele, Lea and Flood, "Fast splittable pseudorandom number
generators", OOPSLA 2014), vectorised over spaces with numpy.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Mapping, Sequence
from typing import Final

import numpy as np
import numpy.typing as npt

U64 = npt.NDArray[np.uint64]
BoolArray = npt.NDArray[np.bool_]
IntArray = npt.NDArray[np.intp]

_M1: Final = np.uint64(0xBF58476D1CE4E5B9)
_M2: Final = np.uint64(0x94D049BB133111EB)


def name_hash(name: str) -> int:
    """A stable 64-bit hash of ``name`` (BLAKE2b, 8 bytes, little-endian)."""
    return int.from_bytes(hashlib.blake2b(name.encode("utf-8"), digest_size=8).digest(),
                          "little")


def space_hashes(space_ids: Sequence[str]) -> U64:
    """The hashes of ``space_ids``, computed once per site."""
    return np.array([name_hash(s) for s in space_ids], dtype=np.uint64)


def weights(spaces: U64, member: str) -> U64:
    """Each space's weight for ``member`` (SplitMix64's finaliser of the xor of the two
    hashes)."""
    with np.errstate(over="ignore"):
        z = spaces ^ np.uint64(name_hash(member))
        z = (z ^ (z >> np.uint64(30))) * _M1
        z = (z ^ (z >> np.uint64(27))) * _M2
        result: U64 = z ^ (z >> np.uint64(31))
    return result


def winners(spaces: U64, members: Iterable[str]) -> tuple[list[str], IntArray]:
    """The members (sorted) and, per space, the index of the one that wins it (-1 when there
    are no members). Ties (a 2^-64 chance) go to the first name in sorted order."""
    names = sorted(set(members))
    if not names:
        return names, np.full(spaces.size, -1, dtype=np.intp)
    w = np.stack([weights(spaces, m) for m in names])
    best: IntArray = np.argmax(w, axis=0).astype(np.intp)
    return names, best


def wins(spaces: U64, member: str, view: Iterable[str]) -> BoolArray:
    """Which spaces ``member`` wins in ``view`` (a member list; ``member`` is added to it)."""
    names, best = winners(spaces, {*view, member})
    result: BoolArray = best == names.index(member)
    return result


def held(spaces: U64, me: str, my_view: Iterable[str],
         others: Mapping[str, Iterable[str]]) -> BoolArray:
    """The spaces ``me`` holds under the hand-over rule: it wins them in ``my_view``, and no
    other live member wins them in that member's published view (``others``: live member ->
    its view; members not in it are taken as gone)."""
    mine = wins(spaces, me, my_view)
    for name, view in others.items():
        if name == me:
            continue
        mine &= ~wins(spaces, name, view)
    return mine


def holders(spaces: U64, views: Mapping[str, Iterable[str]]) -> tuple[list[str], IntArray,
                                                                      npt.NDArray[np.int64]]:
    """Who holds each space when every member in ``views`` (live member -> its published
    view) applies the hand-over rule: the members (sorted), per space the index of its
    holder (-1 when none, or the first when several) and the number of holders."""
    names = sorted(views)
    count = np.zeros(spaces.size, dtype=np.int64)
    first = np.full(spaces.size, -1, dtype=np.intp)
    claims = [wins(spaces, m, views[m]) for m in names]
    for j in range(len(names)):
        h = claims[j].copy()
        for k in range(len(names)):
            if k != j:
                h &= ~claims[k]
        first = np.where((first < 0) & h, j, first)
        count += h
    return names, first, count
