"""Rendezvous ownership of spaces and the hand-over rule (core/ownership.py)."""

from __future__ import annotations

import numpy as np

from thermowarden.core.ownership import held, holders, space_hashes, winners, wins

SPACES = [f"space-{i:04d}" for i in range(3000)]
H = space_hashes(SPACES)


def owner_names(members: list[str]) -> list[str]:
    names, best = winners(H, members)
    return [names[int(b)] for b in best]


def test_every_space_has_exactly_one_winner_and_the_split_is_even() -> None:
    members = ["a", "b", "c"]
    names, best = winners(H, members)
    assert (best >= 0).all()
    counts = np.bincount(best, minlength=3)
    # 3000 spaces over 3 members: each about 1000; 5 sigma of a binomial(3000, 1/3) is ~130
    assert all(abs(int(c) - 1000) < 130 for c in counts), counts
    # every member computes the same owners from the same member list, in any order
    assert owner_names(["c", "a", "b"]) == owner_names(members)


def test_a_leave_moves_only_the_leavers_spaces() -> None:
    before = owner_names(["a", "b", "c"])
    after = owner_names(["a", "c"])
    moved = [i for i, (x, y) in enumerate(zip(before, after, strict=True)) if x != y]
    assert moved and all(before[i] == "b" for i in moved)
    assert all(after[i] in ("a", "c") for i in moved)


def test_a_join_moves_only_spaces_to_the_newcomer_and_about_a_fair_share() -> None:
    before = owner_names(["a", "b"])
    after = owner_names(["a", "b", "c"])
    moved = [i for i, (x, y) in enumerate(zip(before, after, strict=True)) if x != y]
    assert all(after[i] == "c" for i in moved)
    assert abs(len(moved) - len(SPACES) / 3) < 130


def test_the_hand_over_rule_leaves_no_double_owner_and_waits_for_the_old_view() -> None:
    # c joins; a and b have not seen it yet (their published views lack c)
    views = {"a": ["a", "b"], "b": ["a", "b"], "c": ["a", "b", "c"]}
    c_holds = held(H, "c", views["c"], views)
    assert not c_holds.any()  # every space c would win is still claimed by a or b
    # a and b see c: they publish views with c and let go of c's spaces at once
    views = {m: ["a", "b", "c"] for m in "abc"}
    c_holds = held(H, "c", views["c"], views)
    assert (c_holds == wins(H, "c", ["a", "b", "c"])).all()
    names, first, count = holders(H, views)
    assert (count == 1).all()


def test_while_views_differ_each_space_has_at_most_one_holder() -> None:
    views = {"a": ["a", "b", "c"], "b": ["a", "b"], "c": ["a", "b", "c"]}
    names, first, count = holders(H, views)
    assert count.max() == 1
    # the spaces b still claims (in its old view) that c wins in the new one: nobody holds
    # them until b publishes its new view; they are exactly the gap
    gap = wins(H, "b", ["a", "b"]) & wins(H, "c", ["a", "b", "c"])
    assert ((count == 0) == gap).all()


def test_a_dead_member_is_not_asked() -> None:
    # b died: the survivors drop it from their views and from the published views they read
    views = {"a": ["a", "c"], "c": ["a", "c"]}
    names, first, count = holders(H, views)
    assert (count == 1).all()
    assert held(H, "a", ["a", "c"], views).sum() + held(H, "c", ["a", "c"], views).sum() \
        == len(SPACES)


def test_no_members_no_owner() -> None:
    names, best = winners(H, [])
    assert names == [] and (best == -1).all()
