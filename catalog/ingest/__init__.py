"""Read and validate a campaign, pure: ``sources`` (files and workbooks to raw text tables), ``archive`` (bounded zip
reading), ``columns`` (the contract: units, limits, plausible ranges), ``tables`` (typed SI conversion of a table),
``validate`` (the campaign's rules: elements, measurements, blanks, gas over water)."""
