DROP TABLE push_receipts;
