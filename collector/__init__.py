"""lightwarden.collector"""
