"""Sizes of ``--chunk``: read by dask's parser, with the meaning every earlier spelling had.

What is tested
--------------
* Every spelling the tool's own parser accepted before (a number with B,
  kB, MB, GB, KiB, MiB or GiB in any case, spaces allowed, or none) gives
  the same number of bytes: kB, MB and GB are powers of 1000, KiB, MiB and
  GiB powers of 1024 (IEC 80000-13).
* The spellings dask adds: K, M, G (powers of 1000, as dask reads them), Ki,
  Mi, Gi, TB, TiB and exponents (``1e6``).
* Refused with the option's message: an unknown unit, no number, zero, a
  size under one byte, a negative or infinite size.
"""

from __future__ import annotations

import click
import pytest

from upscale.cli.options import parse_bytes, parse_chunk

KB, MB, GB = 10**3, 10**6, 10**9
KIB, MIB, GIB = 2**10, 2**20, 2**30

EARLIER = {
    "500000": 500_000, "10b": 10, "10 B": 10, "1KB": KB, "1kb": KB, "5kB": 5 * KB, "64MB": 64 * MB,
    "64mb": 64 * MB, "64 MB": 64 * MB, " 64MB ": 64 * MB, "1.5GB": 1_500_000_000, "2gb": 2 * GB,
    "1KiB": KIB, "1kib": KIB, "512MiB": 512 * MIB, "1GiB": GIB, "1 gib": GIB, "0.5GiB": GIB // 2,
}  # fmt: skip
ADDED = {"64M": 64 * MB, "1K": KB, "2G": 2 * GB, "64Mi": 64 * MIB, "1Gi": GIB, "1TB": 10**12,
         "1TiB": 2**40, "1e6": 10**6, "2.5e3kB": 2_500_000}  # fmt: skip


@pytest.mark.parametrize(("text", "size"), list(EARLIER.items()))
def test_earlier_spellings_keep_their_meaning(text, size):
    assert parse_bytes(text) == size


@pytest.mark.parametrize(("text", "size"), list(ADDED.items()))
def test_dask_spellings_are_accepted(text, size):
    assert parse_bytes(text) == size


REFUSED = ["12qb", "MB", "", "0", "0MB", "0.5b", "-5MB", "1e400", "inf", "nan", "5 foos"]


@pytest.mark.parametrize("text", REFUSED)
def test_a_size_that_is_no_size_is_refused_with_the_options_message(text):
    with pytest.raises(click.BadParameter, match="is not a size such as 64MB or 1GiB, or a number of blocks"):
        parse_bytes(text)


def test_a_number_of_blocks_is_still_a_number_of_blocks():
    assert parse_chunk("400blocks", (2, 8, 8)) == 400 * 2 * 8 * 8 * 8
    assert parse_chunk("400 blocks", (1, 4, 4)) == parse_chunk("400blocks", (1, 4, 4))
