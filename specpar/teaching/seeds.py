"""Seeds of problem sets: a fresh 128-bit seed by default, a warning for a short hand-picked one,
and the generator seed and the set's label derived from the seed by PBKDF2-HMAC-SHA256, the label
from its own bytes, so nothing printed on the sheet is a draw of the generator and every seed a
student tries costs ``KDF_ITERATIONS`` hash rounds.

References
----------
Moriarty, K., Kaliski, B. & Rusch, A. 2017, RFC 8018, PKCS #5 v2.1 (PBKDF2).
"""
from __future__ import annotations

import hashlib
import secrets
import string
import warnings

__all__ = ["SEED_BITS", "SMALL_SEED_BITS", "KDF_ITERATIONS", "LABEL_LETTERS", "SmallSeedWarning",
           "fresh_seed", "warn_if_small", "derive_seed"]

#: Bits of a seed drawn when none is given (``secrets.randbits``), and the length below which
#: a seed gets a :class:`SmallSeedWarning`.
SEED_BITS, SMALL_SEED_BITS = 128, 64
#: PBKDF2 iterations between the seed and the generator (key stretching, RFC 8018): every seed a
#: student tries costs this much work, on top of the search over all seeds.
KDF_ITERATIONS = 100_000
#: Letters of a set's label (``LAB-XXXX``).
LABEL_LETTERS = 4
#: Bytes of the derived key that seed the generator (256 bits, the SHA-256 output size).
_GENERATOR_BYTES = 32
#: Length of the derived key: the generator's bytes, the label's, and spare bytes (the length every
#: set so far was made with).
_DERIVED_BYTES = 40
_SALT = b"specpar problem set"


class SmallSeedWarning(UserWarning):
    """A hand-picked seed short enough for a student with specpar to find by trying seeds."""


def fresh_seed() -> int:
    """A new ``SEED_BITS``-bit seed from the operating system's random source (:mod:`secrets`)."""
    return secrets.randbits(SEED_BITS)


def warn_if_small(seed: int, stacklevel: int = 3) -> None:
    """A :class:`SmallSeedWarning` if a hand-picked ``seed`` has fewer than ``SMALL_SEED_BITS`` bits."""
    if seed.bit_length() < SMALL_SEED_BITS:
        warnings.warn(f"seed {seed} has only {seed.bit_length()} bits: a student with specpar can try "
                      f"every seed up to it, regenerate the sheet and so find the key; leave the seed out to "
                      f"draw a {SEED_BITS}-bit one (written to the key only) or give one of at least "
                      f"{SMALL_SEED_BITS} bits", SmallSeedWarning, stacklevel=stacklevel)


def derive_seed(seed: int) -> tuple[int, str]:
    """(generator seed, label letters) from the user's seed through PBKDF2-HMAC-SHA256 (RFC 8018).

    The label comes from its own bytes of the derived key, not from the generator's stream, and the
    stretching makes every seed a student tries cost ``KDF_ITERATIONS`` hash rounds.
    """
    raw = int(seed).to_bytes(max(1, (int(seed).bit_length() + 7) // 8), "big")
    key = hashlib.pbkdf2_hmac("sha256", raw, _SALT, KDF_ITERATIONS, dklen=_DERIVED_BYTES)
    gen_seed = int.from_bytes(key[:_GENERATOR_BYTES], "big")
    letters = string.ascii_uppercase
    tag = "".join(letters[b % len(letters)] for b in key[_GENERATOR_BYTES:_GENERATOR_BYTES + LABEL_LETTERS])
    return gen_seed, tag
