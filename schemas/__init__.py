"""Wire format: marshmallow schemas for every JSON body the API reads or writes."""
