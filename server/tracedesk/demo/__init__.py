"""The demo archive: invented records drawn by Tracedesk (aged chart scans with known truth), loaded through the
services with demo accounts and review work (``loader.load_demo``), removed again by ``removal.remove_demo``; and
the home page's guided first run (``first_run``, ``home``)."""
