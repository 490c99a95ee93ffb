"""lightwarden.exporters"""
