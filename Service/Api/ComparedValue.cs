namespace Bitbudget.Service.Api;

/// <summary>One figure on both sides of a comparison and <see cref="Change"/> = other - base; null where a side has no value.</summary>
internal sealed record ComparedValue(double? Base, double? Other, double? Change)
{
    public static ComparedValue Of(double? baseValue, double? otherValue) =>
        new(baseValue, otherValue, baseValue is { } b && otherValue is { } o ? o - b : null);
}
