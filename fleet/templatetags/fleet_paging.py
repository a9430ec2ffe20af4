"""Links between the pages of a long list."""

from django import template

register = template.Library()


@register.simple_tag(takes_context=True)
def page_url(context, number) -> str:
    """This address with `page` set to `number`, its other parameters (filters) kept."""
    query = context["request"].GET.copy()
    query["page"] = number
    return f"?{query.urlencode()}"
