namespace FedGrid.Grid.Optimization;

/// <summary>
/// A sparse matrix in compressed sparse column (CSC) form with a fixed pattern and mutable values:
/// column <c>j</c> holds the entries <c>ColumnPointers[j] .. ColumnPointers[j+1]-1</c>, with strictly
/// increasing row indices. The pattern never changes after construction, so a solver can analyse
/// it once and refactorise as the values change (for example from one 15-minute slot to the next).
/// </summary>
public sealed class SparseMatrix
{
    private readonly int[] _colPtr;
    private readonly int[] _rowIdx;
    private readonly double[] _values;

    private SparseMatrix(int rows, int columns, int[] colPtr, int[] rowIdx, double[] values)
    {
        RowCount = rows;
        ColumnCount = columns;
        _colPtr = colPtr;
        _rowIdx = rowIdx;
        _values = values;
    }

    /// <summary>Number of rows.</summary>
    public int RowCount { get; }

    /// <summary>Number of columns.</summary>
    public int ColumnCount { get; }

    /// <summary>Number of stored entries.</summary>
    public int NonZeroCount => _rowIdx.Length;

    /// <summary>Start of each column in <see cref="RowIndices"/> and <see cref="Values"/> (length columns + 1).</summary>
    public ReadOnlySpan<int> ColumnPointers => _colPtr;

    /// <summary>Row index of each stored entry, ascending within a column.</summary>
    public ReadOnlySpan<int> RowIndices => _rowIdx;

    /// <summary>Value of each stored entry; writable so a caller can change coefficients in place.</summary>
    public Span<double> Values => _values;

    internal int[] ColPtrArray => _colPtr;
    internal int[] RowIdxArray => _rowIdx;
    internal double[] ValueArray => _values;

    /// <summary>An empty matrix (no stored entries) of the given shape.</summary>
    public static SparseMatrix Empty(int rows, int columns) =>
        new(rows, columns, new int[columns + 1], [], []);

    /// <summary>
    /// Builds a matrix from triplets (row, column, value); duplicates are summed. Explicit zeros are
    /// kept as stored entries, so a pattern can reserve room for values set later.
    /// </summary>
    /// <exception cref="ArgumentException">Lengths differ, or an index is out of range, or a value is not finite.</exception>
    public static SparseMatrix FromTriplets(int rows, int columns, ReadOnlySpan<int> rowIndex, ReadOnlySpan<int> columnIndex, ReadOnlySpan<double> value)
    {
        if (rows < 0 || columns < 0) throw new ArgumentException($"matrix shape must be non-negative, got {rows}×{columns}");
        if (rowIndex.Length != columnIndex.Length || rowIndex.Length != value.Length)
            throw new ArgumentException($"triplet arrays differ in length ({rowIndex.Length}, {columnIndex.Length}, {value.Length})");
        int nnz = rowIndex.Length;
        var count = new int[columns + 1];
        for (int k = 0; k < nnz; k++)
        {
            int r = rowIndex[k], c = columnIndex[k];
            if ((uint)r >= (uint)rows || (uint)c >= (uint)columns)
                throw new ArgumentException($"triplet {k} at ({r}, {c}) is outside a {rows}×{columns} matrix");
            if (!double.IsFinite(value[k]))
                throw new ArgumentException($"triplet {k} at ({r}, {c}) has a non-finite value {value[k]}");
            count[c + 1]++;
        }
        for (int c = 0; c < columns; c++) count[c + 1] += count[c];
        var next = (int[])count.Clone();
        var ri = new int[nnz];
        var vi = new double[nnz];
        for (int k = 0; k < nnz; k++)
        {
            int c = columnIndex[k];
            int dst = next[c]++;
            ri[dst] = rowIndex[k];
            vi[dst] = value[k];
        }
        // Sort each column by row and merge duplicates.
        var colPtr = new int[columns + 1];
        int write = 0;
        var order = new List<(int Row, double Value)>();
        for (int c = 0; c < columns; c++)
        {
            order.Clear();
            for (int p = count[c]; p < count[c + 1]; p++) order.Add((ri[p], vi[p]));
            order.Sort((a, b) => a.Row.CompareTo(b.Row));
            colPtr[c] = write;
            for (int t = 0; t < order.Count; t++)
            {
                if (write > colPtr[c] && ri[write - 1] == order[t].Row)
                    vi[write - 1] += order[t].Value;
                else
                {
                    ri[write] = order[t].Row;
                    vi[write] = order[t].Value;
                    write++;
                }
            }
        }
        colPtr[columns] = write;
        return new SparseMatrix(rows, columns, colPtr, ri[..write], vi[..write]);
    }

    /// <summary>y += alpha · this · x.</summary>
    public void MultiplyAdd(double alpha, ReadOnlySpan<double> x, Span<double> y)
    {
        for (int j = 0; j < ColumnCount; j++)
        {
            double xj = alpha * x[j];
            if (xj == 0) continue;
            for (int p = _colPtr[j]; p < _colPtr[j + 1]; p++) y[_rowIdx[p]] += _values[p] * xj;
        }
    }

    /// <summary>y += alpha · thisᵀ · x.</summary>
    public void TransposeMultiplyAdd(double alpha, ReadOnlySpan<double> x, Span<double> y)
    {
        for (int j = 0; j < ColumnCount; j++)
        {
            double s = 0;
            for (int p = _colPtr[j]; p < _colPtr[j + 1]; p++) s += _values[p] * x[_rowIdx[p]];
            y[j] += alpha * s;
        }
    }

    /// <summary>
    /// y += alpha · S · x where this matrix holds the upper triangle (row ≤ column) of a symmetric S.
    /// </summary>
    public void SymmetricUpperMultiplyAdd(double alpha, ReadOnlySpan<double> x, Span<double> y)
    {
        for (int j = 0; j < ColumnCount; j++)
        {
            double xj = x[j], s = 0;
            for (int p = _colPtr[j]; p < _colPtr[j + 1]; p++)
            {
                int i = _rowIdx[p];
                double v = _values[p];
                y[i] += alpha * v * xj;
                if (i != j) s += v * x[i];
            }
            y[j] += alpha * s;
        }
    }
}
