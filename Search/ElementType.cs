namespace Bitbudget.Search;

/// <summary>Element types the engine understands in model inputs, outputs and datasets.</summary>
public enum ElementType
{
    /// <summary>A type the engine does not handle; carried so errors can name it.</summary>
    Unsupported,
    Float32,
    Float16,
    Float64,
    Int64,
    Int32,
    Int8,
    UInt8,
    Bool,
}
