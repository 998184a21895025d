"""Stage 2: read the data table and reduce each pair to what the model needs.

The model needs only sufficient statistics (n, two means, the centred sums of
squares and cross-products), so the cost of a fit does not grow with the
number of rows. The complete rows are kept only for the scatter plot.
"""

from __future__ import annotations

import csv
import difflib
import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from reportgen.errors import DataError
from reportgen.spec import PairSpec, Spec

MIN_COMPLETE_ROWS = 4
CSV_ENCODINGS = ("utf-8", "cp1252", "latin-1")
CSV_DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "bar"}
EXCEL_SUFFIXES = {".xlsx", ".xlsm", ".xls"}
PARQUET_SUFFIXES = {".parquet", ".pq"}


@dataclass(frozen=True)
class SufficientStats:
    """What the bivariate-normal likelihood needs from the rows of one pair."""

    n: int
    mean_x: float
    mean_y: float
    sxx: float  # sum of (x - mean_x)^2
    syy: float
    sxy: float  # sum of (x - mean_x)(y - mean_y)

    @property
    def sd_x(self) -> float:
        return float(np.sqrt(self.sxx / (self.n - 1)))

    @property
    def sd_y(self) -> float:
        return float(np.sqrt(self.syy / (self.n - 1)))

    @property
    def sample_r(self) -> float:
        return float(self.sxy / np.sqrt(self.sxx * self.syy))


@dataclass(frozen=True)
class PairData:
    pair: PairSpec
    x: np.ndarray
    y: np.ndarray
    n_rows: int
    n_dropped: int
    stats: SufficientStats


@dataclass(frozen=True)
class Table:
    path: Path
    sha256: str
    frame: pd.DataFrame
    encoding: str
    sheet: str

    @property
    def n_rows(self) -> int:
        return len(self.frame)


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def sufficient_stats(x: np.ndarray, y: np.ndarray) -> SufficientStats:
    """Two-pass (centred) sums, which stay accurate when the means are large."""
    mean_x = float(np.mean(x))
    mean_y = float(np.mean(y))
    dx = x - mean_x
    dy = y - mean_y
    return SufficientStats(
        n=int(x.size),
        mean_x=mean_x,
        mean_y=mean_y,
        sxx=float(dx @ dx),
        syy=float(dy @ dy),
        sxy=float(dx @ dy),
    )


def _detect_format(path: Path, declared: str) -> str:
    if declared != "auto":
        return declared
    suffix = path.suffix.lower()
    if suffix in EXCEL_SUFFIXES:
        return "excel"
    if suffix in PARQUET_SUFFIXES:
        return "parquet"
    return "csv"


def _sniff_text(path: Path) -> tuple[str, str]:
    """The encoding that decodes the file's start, and that start as text."""
    head = path.read_bytes()[:65536]
    for encoding in CSV_ENCODINGS:
        try:
            return encoding, head.decode(encoding)
        except UnicodeDecodeError:
            # a multi-byte character cut at the 64 KiB boundary is not a wrong encoding
            try:
                return encoding, head[:-3].decode(encoding)
            except UnicodeDecodeError:
                continue
    raise DataError(f"{path}: could not decode the text (tried {', '.join(CSV_ENCODINGS)}); "
                    "re-save the file as UTF-8")


def _delimiter(header: str) -> str:
    """Comma unless the header line clearly uses another common delimiter."""
    counts = {d: header.count(d) for d in CSV_DELIMITERS}
    best = max(counts, key=lambda d: counts[d])
    return best if counts[best] > 0 else ","


def _read_csv(path: Path) -> tuple[pd.DataFrame, str]:
    encoding, text = _sniff_text(path)
    if not text.strip():
        raise DataError(f"{path}: the file is empty; it needs a header row and data rows")
    header_line = text.lstrip("\ufeff").splitlines()[0]
    delimiter = _delimiter(header_line)
    header = next(csv.reader([header_line], delimiter=delimiter))
    names = [name.strip() for name in header]
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise DataError(f"{path}: the column name `{repeated[0]}` appears more than once in the header; "
                        "rename one")
    try:
        frame = pd.read_csv(path, encoding=encoding, sep=delimiter, dtype=str, keep_default_na=False)
    except UnicodeDecodeError:
        raise DataError(f"{path}: the file mixes text encodings ({encoding} fits its start only); "
                        "re-save it as UTF-8") from None
    except pd.errors.ParserError as exc:
        detail = str(exc).strip().splitlines()[-1][:120]
        raise DataError(f"{path}: not a readable table ({detail}); check that every row has the same "
                        f"number of {DELIMITER_NAMES[delimiter]}-separated fields") from None
    frame.columns = [str(c).strip().lstrip("\ufeff") for c in frame.columns]
    return frame, encoding


def _read_excel(path: Path, sheet: str) -> pd.DataFrame:
    try:
        sheets = pd.ExcelFile(path).sheet_names
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        raise DataError(f"{path}: not a readable Excel workbook ({type(exc).__name__})") from None
    if sheet:
        if sheet not in sheets:
            raise DataError(f"{path}: no sheet named `{sheet}`; the sheets are: {', '.join(sheets)}")
        chosen = sheet
    elif len(sheets) == 1:
        chosen = sheets[0]
    else:
        raise DataError(f"{path}: the workbook has several sheets ({', '.join(sheets)}); "
                        "name one with data.sheet in the spec")
    return pd.read_excel(path, sheet_name=chosen, dtype=object)


def load_table(spec: Spec) -> Table:
    """Read the spec's data file as text cells; numeric parsing happens per column."""
    path = spec.data_path
    source = spec.document.data
    if not path.exists():
        raise DataError(f"{path}: data file not found (data.path = {source.path!r} in the spec, "
                        "relative to the spec's folder)")
    if not path.is_file():
        raise DataError(f"{path}: is a folder; data.path must name a file")
    kind = _detect_format(path, source.format)
    encoding = ""
    if kind == "csv":
        frame, encoding = _read_csv(path)
    elif kind == "excel":
        frame = _read_excel(path, source.sheet)
    else:
        try:
            frame = pd.read_parquet(path)
        except Exception as exc:  # pyarrow raises its own types for a broken file
            raise DataError(f"{path}: not a readable Parquet file ({type(exc).__name__})") from None
    if frame.columns.duplicated().any():
        repeated = frame.columns[frame.columns.duplicated()][0]
        raise DataError(f"{path}: the column name `{repeated}` appears more than once; rename one")
    frame.columns = [str(c) for c in frame.columns]
    if len(frame) == 0:
        raise DataError(f"{path}: the table has a header but no data rows")
    if source.columns:
        _require_columns(path, frame, source.columns, "data.columns")
        frame = frame.loc[:, list(source.columns)]
    _require_columns(path, frame, spec.columns_needed, "pairs")
    return Table(path=path, sha256=file_sha256(path), frame=frame, encoding=encoding,
                 sheet=source.sheet)


def _require_columns(path: Path, frame: pd.DataFrame, wanted: tuple[str, ...], where: str) -> None:
    available = [str(c) for c in frame.columns]
    for column in wanted:
        if column not in available:
            close = difflib.get_close_matches(column, available, n=3, cutoff=0.5)
            hint = f"; close matches: {', '.join(close)}" if close else ""
            raise DataError(f"{path}: column `{column}` (named in {where}) is not in the data"
                            f"{hint}. Columns are: {', '.join(available[:12])}"
                            f"{' ...' if len(available) > 12 else ''}")


def _numeric_column(path: Path, frame: pd.DataFrame, column: str) -> np.ndarray:
    raw = frame[column]
    if pd.api.types.is_numeric_dtype(raw):
        values = raw.to_numpy(dtype=float, na_value=np.nan).copy()
        bad_mask = np.zeros(len(values), dtype=bool)
    else:
        text = raw.astype("string").str.strip()
        missing = text.isna() | text.isin(["", "NA", "N/A", "NaN", "nan", "null", "NULL", "-"])
        parsed = pd.to_numeric(text.mask(missing), errors="coerce")
        values = parsed.to_numpy(dtype=float, na_value=np.nan).copy()
        bad_mask = (~missing.to_numpy(dtype=bool)) & np.isnan(values)
    if bad_mask.any():
        rows = np.flatnonzero(bad_mask)[:3]
        cells = ", ".join(f"row {r + 2} ({str(raw.iloc[r])[:20]!r})" for r in rows)
        raise DataError(f"{path}: column `{column}` has non-numeric values at {cells}"
                        f"{' and more' if bad_mask.sum() > 3 else ''}; fix or blank those cells")
    if np.isinf(values).any():
        row = int(np.flatnonzero(np.isinf(values))[0])
        raise DataError(f"{path}: column `{column}` has an infinite value at row {row + 2}; "
                        "replace it with a number or leave it blank")
    return values


def pair_data(table: Table, pair: PairSpec, missing_policy: str) -> PairData:
    """Complete rows of one pair, checked for what cannot be fitted."""
    x_all = _numeric_column(table.path, table.frame, pair.x)
    y_all = _numeric_column(table.path, table.frame, pair.y)
    complete = ~(np.isnan(x_all) | np.isnan(y_all))
    n_dropped = int((~complete).sum())
    where = f"{table.path}: pair ({pair.x}, {pair.y})"
    if n_dropped and missing_policy == "fail":
        row = int(np.flatnonzero(~complete)[0])
        raise DataError(f"{where} has {n_dropped} rows with a missing value (first at row {row + 2}) "
                        "and data.missing = \"fail\"; fill them or set data.missing = \"listwise\"")
    x = x_all[complete]
    y = y_all[complete]
    if x.size < MIN_COMPLETE_ROWS:
        raise DataError(f"{where} has {x.size} complete rows; at least {MIN_COMPLETE_ROWS} are "
                        "needed to estimate a correlation")
    for name, values in ((pair.x, x), (pair.y, y)):
        if np.ptp(values) == 0:
            raise DataError(f"{where}: column `{name}` is constant over the complete rows, so its "
                            "correlation is undefined; choose another column")
    return PairData(pair=pair, x=x, y=y, n_rows=table.n_rows, n_dropped=n_dropped,
                    stats=sufficient_stats(x, y))


def load_pairs(spec: Spec, table: Table) -> tuple[PairData, ...]:
    """Every pair of the spec, validated before anything is fitted."""
    policy = spec.document.data.missing
    return tuple(pair_data(table, pair, policy) for pair in spec.pairs)
