"""Accounts: users and roles, passwords, browser sessions with CSRF tokens, API tokens and login throttling."""
