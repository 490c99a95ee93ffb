"""lightwarden.rules"""
