"""Which accounts an import names, checked before anything is written.

An import may only file posts under accounts the store holds, unless the
person asked for new ones (``new_accounts``: the zone new accounts start
in). A typo is then refused with the closest handles instead of quietly
becoming an account in UTC. The file's ``account`` column is read in the
same pass that checks the date order, so the refusal comes before the
first batch is stored.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator

from models.errors import NotFound
from service.clock import zone
from service.ingest.csvread import Record
from service.storage.handles import CREATE_HINT, fold_handle, handle_problem, suggestion, unknown_account
from service.storage.store import Store

#: How many unknown handles one message names.
SHOWN = 5


def handles_in(
    records: Iterable[object], *, time_at: int, account_at: int | None, lines: dict[str, list[int]]
) -> Iterator[tuple[int, str]]:
    """(line, time text) of each readable record, for the date-order check;
    meanwhile the valid folded handles of the account column go into
    ``lines`` (handle -> the lines naming it). Invalid handles are left to
    the row check, which rejects them with their line."""
    for item in records:
        if not isinstance(item, Record):
            continue
        f = item.fields
        if account_at is not None and len(f) > account_at:
            h = fold_handle(f[account_at])
            if h and handle_problem(h) is None:
                lines.setdefault(h, []).append(item.line)
        if len(f) > time_at:
            yield item.line, f[time_at]


def accounts_to_create(
    store: Store,
    *,
    account: str | None,
    column: dict[str, list[int]],
    new_accounts: str | None,
    where: str,
) -> list[str]:
    """The handles this import would create: none unless ``new_accounts``
    names their zone; otherwise an unknown one is refused (NotFound) with
    its lines and the closest known handles."""
    known = {a.handle for a in store.accounts()}
    if account is not None and account not in known and new_accounts is None:
        raise unknown_account(account, known, hint=CREATE_HINT)
    missing = {h: ls for h, ls in column.items() if h not in known}
    if missing and new_accounts is None:
        said = []
        for h, ls in list(missing.items())[:SHOWN]:
            more = f" and {len(ls) - 1} more rows" if len(ls) > 1 else ""
            said.append(f"{h!r} on line {ls[0]}{more} ({suggestion(h, known)})")
        rest = f"; and {len(missing) - SHOWN} more" if len(missing) > SHOWN else ""
        raise NotFound(
            f"the account column names {len(missing)} account{'s' if len(missing) > 1 else ''} "
            f"the store lacks: {'; '.join(said)}{rest}; nothing was stored",
            where=where,
            field="account",
            value=next(iter(missing)),
            hint=CREATE_HINT,
        )
    if new_accounts is not None:
        zone(new_accounts)  # an unknown zone name is refused before anything is made
    new = [account] if account is not None and account not in known else []
    return new + [h for h in missing if h not in new]
