"""The laboratory's own identity: name, address and accreditation, as the admin keeps them."""
