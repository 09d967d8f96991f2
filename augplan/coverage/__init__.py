"""Coverage (`augplan coverage`) and the draft recipe (`augplan draft`)."""
