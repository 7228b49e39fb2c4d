"""The openpyxl side: read trial ranges from a workbook into plain data."""
