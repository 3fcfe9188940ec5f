"""Small wording helpers shared by the report's sections."""

from __future__ import annotations

import pandas as pd

from tinyconv import fmt
from tinyconv.report.html import esc


def count(n: int, noun: str) -> str:
    """'1 candidate', '3 candidates'."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def code(v: object) -> str:
    """A value as inline code, escaped."""
    return f"<code>{esc(str(v))}</code>"


def arch_code(v: object) -> str:
    """An architecture text as inline code that may break after '/' and '-' only."""
    text = esc(str(v)).replace("/", "/<wbr>").replace("-", "-<wbr>")
    return f'<code class="arch">{text}</code>'


def acc_pm(row: pd.Series) -> str:
    """A ranking row's held-out accuracy with its standard error."""
    return fmt.accuracy(row["acc_mean"], row["acc_se"])
