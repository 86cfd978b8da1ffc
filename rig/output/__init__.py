"""What fringecal writes and reads back: figures, report, dashboard, table and result files, finished runs."""
