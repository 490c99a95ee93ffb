"""lightwarden.collector.platforms"""
