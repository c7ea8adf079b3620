namespace Bitbudget.Service.Api;

/// <summary>
/// One figure on both sides of a comparison and <see cref="Change"/> = other - base; null where a side has no value.
/// Equal values change by 0, so two infinite SQNRs (a layer kept FP32 on both sides) do not give NaN.
/// </summary>
internal sealed record ComparedValue(double? Base, double? Other, double? Change)
{
    public static ComparedValue Of(double? baseValue, double? otherValue) =>
        new(baseValue, otherValue, baseValue is { } b && otherValue is { } o ? (b.Equals(o) ? 0 : o - b) : null);
}
