"""The xlwings side: worksheet functions (`functions`) and the live-workbook port (`live`).

Install with ``pip install 'workbook-tools[excel]'``; see the README section
"In the spreadsheet" for the Excel setup.
"""
