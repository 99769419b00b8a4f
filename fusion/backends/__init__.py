"""The two interchangeable back ends behind one ``Backend`` protocol (see ``base``)."""
