"""lightwarden.collector.ssh.platforms"""
