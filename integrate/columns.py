"""Names of the meta columns every canonical frame carries (declared once)."""

SOURCE = "_source"  # source name, as in its mapping file
RECORD_ID = "_record_id"  # the record's ID within its source
ROW = "_row"  # row or line number in the source file, for messages
TRUST = "_trust"  # the source's trust rank (1 = most trusted)
RECORD_DATE = "_record_date"  # ISO date that dates the record (for 'most_recent')
META_COLUMNS = (SOURCE, RECORD_ID, ROW, TRUST, RECORD_DATE)
