"""Called by the SampleCall macro of job_sheet_runner.xlsm: run the job sheet."""

from workbook_tools.excel.live import run_jobs


def main():
    run_jobs()
