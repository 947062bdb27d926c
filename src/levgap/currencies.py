"""ISO 4217 currency codes, shipped with levgap so that the check needs no network.

``CURRENT`` is ISO 4217 List One (current currency and funds codes) as published by the ISO
4217 maintenance agency on 2026-01-01, taken from the copy of its table in the PyPI package
``iso4217`` 1.16.20260101 (``iso4217/table.xml``), joined with Debian's ``iso-codes`` 4.15.0
(``iso_4217.json``), which still lists HRK. ``WITHDRAWN`` holds codes withdrawn since 1998
(ISO 4217 List Three: the euro's predecessors and redenominated currencies) that a panel with
history may carry; that list is recalled from memory, not copied from the standard, and errs
on the side of accepting a code.
"""

from __future__ import annotations

CURRENT: tuple[str, ...] = (
    "AED", "AFN", "ALL", "AMD", "ANG", "AOA", "ARS", "AUD", "AWG", "AZN", "BAM", "BBD", "BDT",
    "BGN", "BHD", "BIF", "BMD", "BND", "BOB", "BOV", "BRL", "BSD", "BTN", "BWP", "BYN", "BZD",
    "CAD", "CDF", "CHE", "CHF", "CHW", "CLF", "CLP", "CNY", "COP", "COU", "CRC", "CUC", "CUP",
    "CVE", "CZK", "DJF", "DKK", "DOP", "DZD", "EGP", "ERN", "ETB", "EUR", "FJD", "FKP", "GBP",
    "GEL", "GHS", "GIP", "GMD", "GNF", "GTQ", "GYD", "HKD", "HNL", "HRK", "HTG", "HUF", "IDR",
    "ILS", "INR", "IQD", "IRR", "ISK", "JMD", "JOD", "JPY", "KES", "KGS", "KHR", "KMF", "KPW",
    "KRW", "KWD", "KYD", "KZT", "LAK", "LBP", "LKR", "LRD", "LSL", "LYD", "MAD", "MDL", "MGA",
    "MKD", "MMK", "MNT", "MOP", "MRU", "MUR", "MVR", "MWK", "MXN", "MXV", "MYR", "MZN", "NAD",
    "NGN", "NIO", "NOK", "NPR", "NZD", "OMR", "PAB", "PEN", "PGK", "PHP", "PKR", "PLN", "PYG",
    "QAR", "RON", "RSD", "RUB", "RWF", "SAR", "SBD", "SCR", "SDG", "SEK", "SGD", "SHP", "SLE",
    "SLL", "SOS", "SRD", "SSP", "STN", "SVC", "SYP", "SZL", "THB", "TJS", "TMT", "TND", "TOP",
    "TRY", "TTD", "TWD", "TZS", "UAH", "UGX", "USD", "USN", "UYI", "UYU", "UYW", "UZS", "VED",
    "VES", "VND", "VUV", "WST", "XAD", "XAF", "XAG", "XAU", "XBA", "XBB", "XBC", "XBD", "XCD",
    "XCG", "XDR", "XOF", "XPD", "XPF", "XPT", "XSU", "XTS", "XUA", "XXX", "YER", "ZAR", "ZMW",
    "ZWG", "ZWL",
)

WITHDRAWN: tuple[str, ...] = (
    "AFA", "ATS", "AZM", "BEF", "BGL", "BYR", "CSD", "CYP", "DEM", "EEK", "ESP", "FIM", "FRF",
    "GHC", "GRD", "IEP", "ITL", "LTL", "LUF", "LVL", "MGF", "MRO", "MTL", "MZM", "NLG",
    "PTE", "ROL", "RUR", "SDD", "SIT", "SKK", "SRG", "STD", "TMM", "TRL", "VEB", "VEF", "XEU",
    "YUM", "ZMK", "ZWD", "ZWN", "ZWR",
)

CURRENCIES: frozenset[str] = frozenset(CURRENT + WITHDRAWN)
"""Every code a ``currency`` cell or ``[units] currency`` may hold (compared in upper case)."""
